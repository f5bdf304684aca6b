package main

import (
	"io"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
)

// TestLocalAuthAndBackupToken (issue 9 item 9): with --local-auth the
// embedded server requires the generated credentials (files mode 600) and
// publishers may only publish input subjects; /admin/backup needs a token
// even on loopback (on the old code it returned the whole store to any
// local process, and the embedded server had no authentication).
func TestLocalAuthAndBackupToken(t *testing.T) {
	bin := buildIngest(t)
	tmp := t.TempDir()
	dir := filepath.Join(tmp, "data")
	port := freePort(t)
	url := "nats://127.0.0.1:" + strconv.Itoa(port)
	var logs lockedBuffer
	w := exec.Command(bin, "--data", dir, "--port", strconv.Itoa(port), "--local-auth", "--http", "127.0.0.1:0", "--report-interval", "0")
	w.Stdout, w.Stderr = &logs, &logs
	if err := w.Start(); err != nil {
		t.Fatal(err)
	}
	defer func() { w.Process.Kill(); w.Wait() }()
	var addr string
	for deadline := time.Now().Add(20 * time.Second); addr == ""; {
		if m := regexp.MustCompile(`http: (http://127\.0\.0\.1:\d+)/`).FindStringSubmatch(logs.String()); m != nil && strings.Contains(logs.String(), "worker: partitions") {
			addr = m[1]
		}
		if time.Now().After(deadline) {
			t.Fatalf("worker did not start:\n%s", logs.String())
		}
		time.Sleep(50 * time.Millisecond)
	}
	if !strings.Contains(logs.String(), "credentials required") {
		t.Errorf("the start line does not say credentials are required:\n%s", logs.String())
	}
	for _, f := range []string{"nats-worker.auth", "nats-publisher.auth", "backup.token"} {
		st, err := os.Stat(filepath.Join(dir, f))
		if err != nil || st.Mode().Perm() != 0o600 {
			t.Errorf("%s: %v, mode %v; want mode 600", f, err, st.Mode().Perm())
		}
	}
	in := filepath.Join(tmp, "in.jsonl")
	os.WriteFile(in, []byte(`{"id":"e1","user":"u","time":"2026-10-01T10:00:00Z","kind":"action","action":"x"}`+"\n"), 0o644)
	if out, err := exec.Command(bin, "send", "--nats", url, "--retry-for", "2s", "--progress=false", in).CombinedOutput(); err == nil {
		t.Errorf("send without credentials succeeded:\n%s", out)
	}
	pub := filepath.Join(dir, "nats-publisher.auth")
	if out, err := exec.Command(bin, "send", "--nats", url, "--nats-auth-file", pub, "--progress=false", in).CombinedOutput(); err != nil || !strings.Contains(string(out), "1 stored") {
		t.Errorf("send with the publisher's credentials: %v\n%s", err, out)
	}
	// The publisher may not ask for an erasure nor publish around the mapping.
	c := readCred(t, pub)
	violations := make(chan error, 4)
	nc, err := nats.Connect(url, nats.UserInfo(c[0], c[1]), nats.ErrorHandler(func(_ *nats.Conn, _ *nats.Subscription, err error) { violations <- err }))
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	for _, subj := range []string{"tl.admin.forget", "tl.ev.0.action.0000000000000000"} {
		nc.Publish(subj, []byte(`{"user":"u"}`))
		nc.Flush()
		select {
		case err := <-violations:
			if !strings.Contains(strings.ToLower(err.Error()), "permissions violation") {
				t.Errorf("publish to %s: %v", subj, err)
			}
		case <-time.After(3 * time.Second):
			t.Errorf("publish to %s by the publisher was allowed", subj)
		}
	}

	get := func(token string) (int, int) {
		req, _ := http.NewRequest(http.MethodGet, addr+"/admin/backup", nil)
		if token != "" {
			req.Header.Set("Authorization", "Bearer "+token)
		}
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		b, _ := io.ReadAll(resp.Body)
		return resp.StatusCode, len(b)
	}
	if code, _ := get(""); code != http.StatusUnauthorized {
		t.Errorf("backup without a token: %d, want 401", code)
	}
	tok, _ := os.ReadFile(filepath.Join(dir, "backup.token"))
	if code, n := get(strings.TrimSpace(string(tok))); code != http.StatusOK || n == 0 {
		t.Errorf("backup with the token: %d, %d bytes", code, n)
	}
}

func readCred(t *testing.T, path string) [2]string {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	u, p, _ := strings.Cut(strings.TrimSpace(string(b)), ":")
	return [2]string{u, p}
}
