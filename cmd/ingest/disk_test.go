package main

import (
	"context"
	"io"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/touchledger/touchledger/internal/stream"
)

// TestLowDiskIsAState (issue 9 item 4): a worker whose disk is below the
// reserve (here a reserve of 1 PiB) starts, logs it, says "not ready" on
// /readyz, shows touchledger_disk_low 1, and consumes nothing; restarted
// with a normal reserve it consumes everything. (On the old code a full
// disk ended the process with SIGBUS and nothing warned before.)
func TestLowDiskIsAState(t *testing.T) {
	bin := buildIngest(t)
	tmp := t.TempDir()
	dir := filepath.Join(tmp, "data")
	low := filepath.Join(tmp, "low.yaml")
	os.WriteFile(low, []byte("store:\n  min_free_mib: 1073741824\n"), 0o644)
	port := freePort(t)
	url := "nats://127.0.0.1:" + strconv.Itoa(port)
	var logs lockedBuffer
	start := func(cfg string) (*exec.Cmd, string) {
		logs = lockedBuffer{}
		args := []string{"--data", dir, "--port", strconv.Itoa(port), "--http", "127.0.0.1:0", "--report-interval", "0"}
		if cfg != "" {
			args = append(args, "--config", cfg)
		}
		cmd := exec.Command(bin, args...)
		cmd.Stdout, cmd.Stderr = &logs, &logs
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		for deadline := time.Now().Add(20 * time.Second); ; {
			if m := regexp.MustCompile(`http: (http://127\.0\.0\.1:\d+)/`).FindStringSubmatch(logs.String()); m != nil && strings.Contains(logs.String(), "worker: partitions") {
				return cmd, m[1]
			}
			if time.Now().After(deadline) {
				cmd.Process.Kill()
				t.Fatalf("worker did not start:\n%s", logs.String())
			}
			time.Sleep(50 * time.Millisecond)
		}
	}
	get := func(url string) (int, string) {
		resp, err := http.Get(url)
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		b, _ := io.ReadAll(resp.Body)
		return resp.StatusCode, string(b)
	}
	w, addr := start(low)
	in := filepath.Join(tmp, "in.jsonl")
	var b strings.Builder
	for i := range 50 {
		b.WriteString(`{"id":"e` + strconv.Itoa(i) + `","user":"u","time":"2026-10-01T10:00:00Z","kind":"action","action":"x"}` + "\n")
	}
	os.WriteFile(in, []byte(b.String()), 0o644)
	if out, err := exec.Command(bin, "send", "--nats", url, "--progress=false", in).CombinedOutput(); err != nil {
		t.Fatalf("send: %v\n%s", err, out)
	}
	time.Sleep(1500 * time.Millisecond)
	if code, body := get(addr + "/readyz"); code != http.StatusServiceUnavailable || !strings.Contains(body, "free disk space below the reserve") {
		t.Errorf("/readyz on a low disk: %d %q", code, body)
	}
	if _, body := get(addr + "/metrics"); !strings.Contains(body, "touchledger_disk_low 1") {
		t.Errorf("metrics lack touchledger_disk_low 1")
	}
	if !strings.Contains(logs.String(), "disk space low") {
		t.Errorf("no log line about the low disk:\n%s", logs.String())
	}
	if _, body := get(addr + "/api/status"); strings.Contains(body, `"accepted":50`) {
		t.Errorf("the worker consumed on a low disk: %s", body)
	}
	w.Process.Signal(syscall.SIGTERM)
	if err := w.Wait(); err != nil {
		t.Fatalf("stop: %v\n%s", err, logs.String())
	}
	w, _ = start("")
	defer w.Process.Kill()
	nc, err := nats.Connect(url)
	if err != nil {
		t.Fatal(err)
	}
	js, _ := jetstream.New(nc)
	scfg := stream.DefaultConfig()
	for deadline := time.Now().Add(20 * time.Second); ; {
		cons, err := js.Consumer(context.Background(), scfg.Stream, stream.ConsumerName(scfg.AllPartitions()))
		if err == nil {
			if i := cons.CachedInfo(); i.NumPending == 0 && i.NumAckPending == 0 && i.AckFloor.Stream >= 50 {
				break
			}
		}
		if time.Now().After(deadline) {
			t.Fatalf("worker did not catch up after space returned:\n%s", logs.String())
		}
		time.Sleep(50 * time.Millisecond)
	}
	nc.Close()
	w.Process.Signal(syscall.SIGTERM)
	if err := w.Wait(); err != nil {
		t.Fatalf("stop: %v\n%s", err, logs.String())
	}
	if cp := checkpointOf(t, dir, scfg.SourceName(scfg.AllPartitions())); cp.Counts.Accepted+uint64(pendingOf(t, dir, scfg.SourceName(scfg.AllPartitions()))) != 50 {
		t.Errorf("after space returned: %+v accepted, want all 50 accepted or buffered", cp.Counts)
	}
}
