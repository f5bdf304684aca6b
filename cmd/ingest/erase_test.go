package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io/fs"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/stream"
)

// TestErasureLeavesNoByte runs the default topology (the worker hosting
// the embedded server, Badger and JetStream under one data directory),
// sends a person's events (valid ones and invalid ones, which become dead
// letters), erases the person over tl.admin.forget, stops the worker and
// scans every file of the directory for the person's id and pseudonym
// (issue 9 item 5). On the old code the JetStream block file kept the
// person's messages in clear text after the purge, dead letters were not
// purged, and older versions of the state stayed in Badger's files.
func TestErasureLeavesNoByte(t *testing.T) {
	bin := buildIngest(t)
	for _, withKey := range []bool{false, true} {
		t.Run(fmt.Sprintf("key=%v", withKey), func(t *testing.T) { eraseAndScan(t, bin, withKey) })
	}
}

func eraseAndScan(t *testing.T, bin string, withKey bool) {
	tmp := t.TempDir()
	dir := filepath.Join(tmp, "data")
	const victim = "erase-me-7f3a9c"
	cfgYAML := "lateness: 1s\nstore:\n  commit_interval: 100ms\n"
	var needles []string = []string{victim}
	if withKey {
		keyFile := filepath.Join(tmp, "key")
		if err := os.WriteFile(keyFile, []byte(strings.Repeat("k3y-material-", 4)), 0o600); err != nil {
			t.Fatal(err)
		}
		cfgYAML += "privacy:\n  key_file: " + keyFile + "\n"
	}
	cfgFile := filepath.Join(tmp, "tl.yaml")
	if err := os.WriteFile(cfgFile, []byte(cfgYAML), 0o644); err != nil {
		t.Fatal(err)
	}
	cfg, err := config.Load(cfgFile)
	if err != nil {
		t.Fatal(err)
	}
	if withKey {
		ps, err := pipeline.PseudonymsFrom(cfg)
		if err != nil {
			t.Fatal(err)
		}
		needles = append(needles, ps.Pseudonym(victim))
	}

	c := shop.DefaultConfig()
	c.Visitors, c.Days, c.ShiftDay, c.IncidentDay = 300, 2, 1, 1
	var buf bytes.Buffer
	if _, err := shop.Generate(&buf, c); err != nil {
		t.Fatal(err)
	}
	at := c.Start.Add(49 * time.Hour) // after the demo's events: accepted, not late
	for i := range 30 {
		ts := at.Add(time.Duration(i) * time.Minute).Format(time.RFC3339)
		switch {
		case i%10 == 0:
			fmt.Fprintf(&buf, `{"id":"x%d","user":%q,"time":%q,"kind":"touch","channel":"email"}`+"\n", i, victim, ts)
		case i%10 == 5: // invalid: a negative value (a dead letter naming the person)
			fmt.Fprintf(&buf, `{"id":"x%d","user":%q,"time":%q,"kind":"action","action":"order","value":-1}`+"\n", i, victim, ts)
		default:
			fmt.Fprintf(&buf, `{"id":"x%d","user":%q,"time":%q,"kind":"action","action":"product_view"}`+"\n", i, victim, ts)
		}
	}
	in := filepath.Join(tmp, "in.jsonl")
	if err := os.WriteFile(in, buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	port := freePort(t)
	url := "nats://127.0.0.1:" + strconv.Itoa(port)
	var logs lockedBuffer
	cmd := exec.Command(bin, "--data", dir, "--port", strconv.Itoa(port), "--config", cfgFile, "--http", "off", "--report-interval", "0")
	cmd.Stdout, cmd.Stderr = &logs, &logs
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	defer cmd.Process.Kill()
	if out, err := exec.Command(bin, "send", "--nats", url, "--config", cfgFile, "--progress=false", in).CombinedOutput(); err != nil {
		t.Fatalf("send: %v\n%s\n%s", err, out, logs.String())
	}
	nc, err := nats.Connect(url)
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	js, err := jetstream.New(nc)
	if err != nil {
		t.Fatal(err)
	}
	scfg := stream.DefaultConfig()
	ctx := context.Background()
	for deadline := time.Now().Add(30 * time.Second); ; {
		cons, err := js.Consumer(ctx, scfg.Stream, stream.ConsumerName(scfg.AllPartitions()))
		if err == nil {
			if i := cons.CachedInfo(); i.NumPending == 0 && i.NumAckPending == 0 && i.AckFloor.Stream > 0 {
				break
			}
		}
		if time.Now().After(deadline) {
			t.Fatalf("worker did not catch up:\n%s", logs.String())
		}
		time.Sleep(50 * time.Millisecond)
	}
	time.Sleep(cfg.Lateness.D() + 500*time.Millisecond) // the wall clock releases the buffered events
	before := scan(t, dir, needles)
	if len(before) == 0 {
		t.Fatalf("the person is nowhere on disk before the erasure: the scan proves nothing")
	}

	body, _ := json.Marshal(map[string]string{"user": victim})
	m, err := nc.Request(stream.ForgetSubject(scfg.Prefix), body, 30*time.Second)
	if err != nil {
		t.Fatal(err)
	}
	var rep stream.ForgetReply
	if err := json.Unmarshal(m.Data, &rep); err != nil {
		t.Fatal(err)
	}
	if rep.Error != "" || !rep.Owner || rep.ForgetReport == nil || !rep.HadState || rep.Purged != 30 || rep.PurgedDead != 3 {
		t.Errorf("forget reply %s: want owner, state, 30 messages and 3 dead letters erased", m.Data)
	}
	nc.Close()
	cmd.Process.Signal(syscall.SIGTERM)
	if err := cmd.Wait(); err != nil {
		t.Fatalf("stop: %v\n%s", err, logs.String())
	}
	if found := scan(t, dir, needles); len(found) > 0 {
		t.Errorf("after the erasure the person is still in %v (before: %v)", found, before)
	}
}

// scan returns "file: needle" for every file under dir holding a needle.
func scan(t *testing.T, dir string, needles []string) []string {
	t.Helper()
	var found []string
	err := filepath.WalkDir(dir, func(path string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		b, err := os.ReadFile(path)
		if err != nil {
			return err
		}
		rel, _ := filepath.Rel(dir, path)
		for _, n := range needles {
			if bytes.Contains(b, []byte(n)) {
				found = append(found, rel+": "+n)
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return found
}
