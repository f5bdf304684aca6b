package main

import (
	"bytes"
	"context"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/stream"
)

// TestRestoreResumesFromBus (issue 6): a backup taken from a running worker
// over HTTP, restored into a new directory, lets a worker started on it
// resume from the backup's committed stream position and catch up from the
// bus; the final answers and counts equal a clean replay — nothing lost,
// nothing counted twice, although the first worker had acknowledged more.
func TestRestoreResumesFromBus(t *testing.T) {
	bin := buildIngest(t)
	c := shop.DefaultConfig()
	c.Visitors, c.Days, c.ShiftDay, c.IncidentDay = 4000, 5, 2, 4
	var buf bytes.Buffer
	if _, err := shop.Generate(&buf, c); err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(buf.String()), "\n")
	cfgFile := filepath.Join(t.TempDir(), "tl.yaml")
	writeFile(t, cfgFile, "lateness: 2s\nstore:\n  commit_events: 2000\n  commit_interval: 200ms\n")
	fcfg, err := config.Load(cfgFile)
	if err != nil {
		t.Fatal(err)
	}
	scfg := stream.DefaultConfig()
	srv, url, err := stream.StartEmbedded(t.TempDir(), stream.EmbedPort(0), stream.EmbedConfig(scfg))
	if err != nil {
		t.Fatal(err)
	}
	defer func() { srv.Shutdown(); srv.WaitForShutdown() }()
	nc, err := nats.Connect(url)
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	js, _ := jetstream.New(nc)
	ctx := context.Background()
	if err := stream.EnsureStream(ctx, js, scfg); err != nil {
		t.Fatal(err)
	}
	send := func(ls []string) {
		if _, err := stream.Send(ctx, js, strings.NewReader(strings.Join(ls, "\n")), stream.SendOptions{}); err != nil {
			t.Fatal(err)
		}
	}
	var out lockedBuffer
	start := func(dir string) *exec.Cmd {
		cmd := exec.Command(bin, "--data", dir, "--nats", url, "--config", cfgFile, "--http", "127.0.0.1:0", "--report-interval", "0")
		cmd.Stdout, cmd.Stderr = &out, &out
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		return cmd
	}
	waitCaughtUp := func() {
		deadline := time.Now().Add(60 * time.Second)
		for {
			cons, err := js.Consumer(ctx, scfg.Stream, stream.ConsumerName(scfg.AllPartitions()))
			if err == nil {
				if info := cons.CachedInfo(); info.NumPending == 0 && info.NumAckPending == 0 && info.AckFloor.Stream > 0 {
					return
				}
			}
			if time.Now().After(deadline) {
				t.Fatalf("worker did not catch up:\n%s", out.String())
			}
			time.Sleep(50 * time.Millisecond)
		}
	}
	half := len(lines) / 2
	dir1 := t.TempDir()
	w1 := start(dir1)
	send(lines[:half])
	waitCaughtUp()
	var addr string
	for i := 0; i < 100 && addr == ""; i++ {
		if m := regexp.MustCompile(`http: (http://127\.0\.0\.1:\d+)/`).FindStringSubmatch(out.String()); m != nil {
			addr = m[1]
		}
		time.Sleep(50 * time.Millisecond)
	}
	if addr == "" {
		t.Fatalf("no HTTP address in the worker's output:\n%s", out.String())
	}
	backup := filepath.Join(t.TempDir(), "b.backup")
	var o, e bytes.Buffer
	if code := run([]string{"backup", "--from", addr, "--token-file", filepath.Join(dir1, "backup.token"), "--out", backup}, &o, &e); code != 0 {
		t.Fatalf("backup: %s", e.String())
	}
	// The first worker goes on: more events, more acknowledgements, beyond
	// what the backup holds.
	send(lines[half : half+half/2])
	waitCaughtUp()
	w1.Process.Signal(syscall.SIGTERM)
	w1.Wait()

	dir2 := filepath.Join(t.TempDir(), "restored")
	if code := run([]string{"restore", "--in", backup, "--data", dir2}, &o, &e); code != 0 {
		t.Fatalf("restore: %s", e.String())
	}
	w2 := start(dir2)
	send(lines[half+half/2:])
	waitCaughtUp()
	time.Sleep(fcfg.Lateness.D() + time.Second)
	w2.Process.Signal(syscall.SIGTERM)
	if err := w2.Wait(); err != nil {
		t.Fatalf("stop: %v\n%s", err, out.String())
	}
	cp := checkpointOf(t, dir2, scfg.SourceName(scfg.AllPartitions()))
	if cp.Counts.Accepted != uint64(len(lines)) || cp.Counts.Late != 0 {
		t.Errorf("restored worker counts %+v: want %d accepted, 0 late", cp.Counts, len(lines))
	}
	clean := t.TempDir()
	replayClean(t, clean, fcfg, []byte(buf.String()))
	from := c.Start
	to := from.Add(time.Duration(c.Days) * 24 * time.Hour)
	if got, want := allAnswers(t, dir2, fcfg, from, to), allAnswers(t, clean, fcfg, from, to); got != want {
		t.Error("answers after backup, restore and catch-up differ from a clean replay")
	}
}

func writeFile(t *testing.T, path, text string) {
	t.Helper()
	if err := os.WriteFile(path, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
}
