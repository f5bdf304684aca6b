package main

import (
	"bytes"
	"fmt"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"
)

// TestKeyFingerprint (issue 9 item 6): a directory written with a key
// records the key's fingerprint; a replay without the key, or with another
// key of the same version, is refused before anything is read, and so is a
// key on a directory of raw ids. A new key version (a rotation) is
// accepted. On the old code the first two stored raw ids or other
// pseudonyms next to the old ones. A bad key file creates no directory.
func TestKeyFingerprint(t *testing.T) {
	tmp := t.TempDir()
	write := func(name, body string, mode os.FileMode) string {
		p := filepath.Join(tmp, name)
		if err := os.WriteFile(p, []byte(body), mode); err != nil {
			t.Fatal(err)
		}
		return p
	}
	keyA := write("a.key", strings.Repeat("a1", 32), 0o600)
	keyB := write("b.key", strings.Repeat("b2", 32), 0o600)
	cfg := func(name, key string, version int) string {
		return write(name+".yaml", fmt.Sprintf("privacy:\n  key_file: %s\n  key_version: %d\n", key, version), 0o644)
	}
	line := func(i int) string {
		return fmt.Sprintf(`{"id":"e%d","user":"u%d","time":"2026-10-01T10:%02d:00Z","kind":"action","action":"x"}`+"\n", i, i, i)
	}
	in := func(name string, from int) string {
		var b strings.Builder
		for i := from; i < from+5; i++ {
			b.WriteString(line(i))
		}
		return write(name, b.String(), 0o644)
	}
	dir := filepath.Join(tmp, "data")
	ingest := func(args ...string) (int, string) {
		var out, errb bytes.Buffer
		code := run(args, &out, &errb)
		return code, out.String() + errb.String()
	}
	if code, out := ingest("--data", dir, "--replay", in("1.jsonl", 0), "--config", cfg("a1", keyA, 1)); code != 0 {
		t.Fatalf("first replay: %s", out)
	}
	rejects, _ := os.ReadFile(filepath.Join(dir, "rejects.jsonl"))
	for _, c := range []struct {
		name string
		args []string
	}{
		{"no key", []string{"--data", dir, "--replay", in("2.jsonl", 10)}},
		{"another key, same version", []string{"--data", dir, "--replay", in("3.jsonl", 20), "--config", cfg("b1", keyB, 1)}},
	} {
		code, out := ingest(c.args...)
		if code != 1 || !strings.Contains(out, "pseudonymisation key does not match the data directory") {
			t.Errorf("%s: exit %d, %q", c.name, code, out)
		}
		after, _ := os.ReadFile(filepath.Join(dir, "rejects.jsonl"))
		if !bytes.Equal(after, rejects) {
			t.Errorf("%s: the rejects file changed", c.name)
		}
	}
	if code, out := ingest("--data", dir, "--replay", in("4.jsonl", 30), "--config", cfg("b2", keyB, 2)); code != 0 || !strings.Contains(out, "accepted 5") {
		t.Errorf("rotation to version 2: exit %d, %q", code, out)
	}
	if code, out := ingest("--data", dir, "--replay", in("5.jsonl", 40), "--config", cfg("a1", keyA, 1)); code != 0 || !strings.Contains(out, "accepted 5") {
		t.Errorf("the first key again: exit %d, %q", code, out)
	}

	raw := filepath.Join(tmp, "raw")
	if code, out := ingest("--data", raw, "--replay", in("6.jsonl", 50)); code != 0 {
		t.Fatalf("raw replay: %s", out)
	}
	if code, out := ingest("--data", raw, "--replay", in("7.jsonl", 60), "--config", cfg("a1", keyA, 1)); code != 1 || !strings.Contains(out, "raw user ids") {
		t.Errorf("a key on a raw directory: exit %d, %q", code, out)
	}

	// A bad key file (group-readable) creates no directory.
	bad := write("bad.key", strings.Repeat("c3", 32), 0o644)
	fresh := filepath.Join(tmp, "fresh")
	if code, out := ingest("--data", fresh, "--replay", in("8.jsonl", 70), "--config", cfg("bad", bad, 1)); code != 1 || !strings.Contains(out, "chmod 600") {
		t.Errorf("bad key file: exit %d, %q", code, out)
	}
	if _, err := os.Stat(fresh); !os.IsNotExist(err) {
		t.Errorf("a bad key file created the data directory (%v)", err)
	}
}

// TestLockBeforeEmbeddedServer (issue 9 item 8): a second worker on a
// directory in use fails on the directory's lock before it starts an
// embedded server (on the old code it started one on the same JetStream
// directory, restored its streams, and only then failed).
func TestLockBeforeEmbeddedServer(t *testing.T) {
	bin := buildIngest(t)
	dir := filepath.Join(t.TempDir(), "data")
	p1, p2 := freePort(t), freePort(t)
	var logs lockedBuffer
	first := exec.Command(bin, "--data", dir, "--port", strconv.Itoa(p1), "--http", "off")
	first.Stdout, first.Stderr = &logs, &logs
	if err := first.Start(); err != nil {
		t.Fatal(err)
	}
	defer func() { first.Process.Kill(); first.Wait() }()
	for deadline := time.Now().Add(20 * time.Second); !strings.Contains(logs.String(), "worker: partitions"); {
		if time.Now().After(deadline) {
			t.Fatalf("first worker did not start:\n%s", logs.String())
		}
		time.Sleep(50 * time.Millisecond)
	}
	out, err := exec.Command(bin, "--data", dir, "--port", strconv.Itoa(p2), "--http", "off").CombinedOutput()
	if err == nil || !strings.Contains(string(out), "in use by another process") {
		t.Fatalf("second worker: %v\n%s", err, out)
	}
	if strings.Contains(string(out), "nats: ") || strings.Contains(string(out), "embedded") {
		t.Errorf("the second worker started an embedded server before failing:\n%s", out)
	}
	if c, err := net.DialTimeout("tcp", "127.0.0.1:"+strconv.Itoa(p2), 200*time.Millisecond); err == nil {
		c.Close()
		t.Errorf("something listens on the second worker's port")
	}
}
