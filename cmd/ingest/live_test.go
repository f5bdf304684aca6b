package main

import (
	"bufio"
	"bytes"
	"encoding/json"
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

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/feed"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/stream"
)

func TestUsage(t *testing.T) {
	dir := t.TempDir()
	tests := []struct {
		args     []string
		wantCode int
		wantOut  []string
	}{
		{[]string{"--help"}, 0, []string{"ingest send", "tl.in.<kind>.<user key>", "--partitions", "TL_DEAD", "SIGTERM", "/metrics", "--replay"}},
		{[]string{"send", "--help"}, 0, []string{"Nats-Msg-Id", "--rate", "progress"}},
		{[]string{"send"}, 2, []string{"give one FILE"}},
		{[]string{"--http", "off"}, 2, []string{"--data is required"}},
		{[]string{"--data", dir, "--partitions", "9-2", "--http", "off", "--port", "0"}, 1, []string{"partitions 9-2"}},
		{[]string{"--data", dir, "--partition-count", "0", "--http", "off", "--port", "0"}, 1, []string{"partitions 0 not in"}},
		{[]string{"--data", dir, "--http", "0.0.0.0:9464", "--port", "0"}, 1, []string{"refusing to serve"}},
		{[]string{"--data", dir, "--log-format", "xml"}, 2, []string{"--log-format"}},
		{[]string{"--data", dir, "--report-interval", "soon"}, 2, []string{"invalid duration"}},
		{[]string{"--data", dir, "--report-window", "0", "--http", "off", "--port", "0"}, 1, []string{"--report-window must be positive"}},
		{[]string{"--data", dir, "--truth", filepath.Join(dir, "no-such-truth.json"), "--http", "off", "--port", "0"}, 1, []string{"truth file"}},
	}
	for _, tt := range tests {
		var out, errOut bytes.Buffer
		code := run(tt.args, &out, &errOut)
		all := out.String() + errOut.String()
		if code != tt.wantCode {
			t.Errorf("ingest %v: exit %d, want %d\n%s", tt.args, code, tt.wantCode, all)
		}
		for _, w := range tt.wantOut {
			if !strings.Contains(all, w) {
				t.Errorf("ingest %v: output lacks %q:\n%.500s", tt.args, w, all)
			}
		}
	}
}

// TestLiveCommand runs the README's live flow with the built command: a
// worker with its embedded server prints the URLs, `ingest send` publishes
// the demo events, the HTTP API and metrics show them, and SIGTERM stops the
// worker cleanly with a summary.
func TestLiveCommand(t *testing.T) {
	bin := buildIngest(t)
	c := shop.DefaultConfig()
	c.Visitors, c.Days, c.ShiftDay, c.IncidentDay = 1500, 4, 2, 3
	var buf bytes.Buffer
	st, err := shop.Generate(&buf, c)
	if err != nil {
		t.Fatal(err)
	}
	events := filepath.Join(t.TempDir(), "events.jsonl")
	if err := os.WriteFile(events, buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	truthFile := filepath.Join(t.TempDir(), "truth.json")
	if err := os.WriteFile(truthFile, []byte(`{"incremental_total":10,"channels":{"search_ads":6,"social_ads":4}}`), 0o644); err != nil {
		t.Fatal(err)
	}
	cfgFile := filepath.Join(t.TempDir(), "tl.yaml")
	if err := os.WriteFile(cfgFile, []byte("lateness: 1s\nstore:\n  commit_interval: 200ms\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	worker := exec.Command(bin, "--data", t.TempDir(), "--port", "0", "--http", "127.0.0.1:0", "--config", cfgFile, "--quiet-after", "200ms",
		"--report-interval", "300ms", "--report-window", "30d", "--truth", truthFile)
	stdout, err := worker.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	var stderr bytes.Buffer
	worker.Stderr = &stderr
	if err := worker.Start(); err != nil {
		t.Fatal(err)
	}
	defer worker.Process.Kill()
	lines := bufio.NewScanner(stdout)
	var natsURL, httpURL string
	for natsURL == "" || httpURL == "" {
		if !lines.Scan() {
			t.Fatalf("worker output ended early:\n%s", stderr.String())
		}
		if m := regexp.MustCompile(`^nats: (nats://\S+)`).FindStringSubmatch(lines.Text()); m != nil {
			natsURL = m[1]
		}
		if m := regexp.MustCompile(`^http: (http://\S+)/`).FindStringSubmatch(lines.Text()); m != nil {
			httpURL = m[1]
		}
	}
	rest := make(chan string)
	go func() {
		var b strings.Builder
		for lines.Scan() {
			b.WriteString(lines.Text() + "\n")
		}
		rest <- b.String()
	}()

	out, err := exec.Command(bin, "send", "--nats", natsURL, events).CombinedOutput()
	if err != nil {
		t.Fatalf("send: %v\n%s", err, out)
	}
	if !strings.Contains(string(out), " stored, ") {
		t.Errorf("send output %q", out)
	}
	get := func(path string) string {
		resp, err := http.Get(httpURL + path)
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		b, _ := io.ReadAll(resp.Body)
		return string(b)
	}
	var status struct {
		Conversions int64 `json:"conversions"`
	}
	deadline := time.Now().Add(30 * time.Second)
	for status.Conversions != int64(st.Conversions) {
		if time.Now().After(deadline) {
			t.Fatalf("/api/status never reached %d conversions: %s\n%s", st.Conversions, get("/api/status?last=3650d"), stderr.String())
		}
		time.Sleep(100 * time.Millisecond)
		json.Unmarshal([]byte(get("/api/status?last=3650d")), &status)
	}
	// Every event accepted once the lateness has passed without traffic.
	accepted := `touchledger_events_total{outcome="accepted"} ` + strconv.Itoa(st.Events) + "\n"
	for m := get("/metrics"); !strings.Contains(m, accepted); m = get("/metrics") {
		if time.Now().After(deadline) {
			t.Fatalf("/metrics never showed %q:\n%.2000s", accepted, m)
		}
		time.Sleep(100 * time.Millisecond)
	}
	// The dashboard draws the truth file's shares as rings (--truth).
	if page := get("/"); !strings.Contains(page, "simulated true share") || !strings.Contains(page, `class="ref"`) {
		t.Errorf("dashboard without the truth's rings:\n%.800s", page)
	}
	if m := get("/metrics"); !strings.Contains(m, "touchledger_consumer_lag_messages 0") || !strings.Contains(m, "touchledger_buffered_events 0") {
		t.Errorf("/metrics: want lag 0 and nothing buffered:\n%.2000s", m)
	}

	// Feeds and erasure are wired: a credit snapshot per model arrives, and
	// an erasure request is answered by the owner of the partition.
	nc, err := nats.Connect(natsURL)
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	sub, err := nc.SubscribeSync("tl.report.credit")
	if err != nil {
		t.Fatal(err)
	}
	models := map[string]bool{}
	for len(models) < len(query.Models()) {
		m, err := sub.NextMsg(5 * time.Second)
		if err != nil {
			t.Fatalf("credit snapshots of %d models: %v", len(models), err)
		}
		var c feed.CreditMessage
		if err := json.Unmarshal(m.Data, &c); err != nil || c.Window != "30d" || c.Partitions != "0-15" || c.Conversions != int64(st.Conversions) {
			t.Fatalf("snapshot %s (%v): want window 30d, partitions 0-15, %d conversions", m.Data, err, st.Conversions)
		}
		models[c.ModelID] = true
	}
	user := regexp.MustCompile(`"user":"([^"]+)"`).FindSubmatch(buf.Bytes())[1]
	body, _ := json.Marshal(stream.ForgetRequest{User: string(user)})
	m, err := nc.Request(stream.ForgetSubject("tl"), body, 10*time.Second)
	if err != nil {
		t.Fatal(err)
	}
	var rep stream.ForgetReply
	if err := json.Unmarshal(m.Data, &rep); err != nil || rep.ForgetReport == nil || !rep.HadState || !rep.Owner || rep.Purged == 0 {
		t.Errorf("erasure reply %s (%v)", m.Data, err)
	}
	worker.Process.Signal(syscall.SIGTERM)
	summary := <-rest
	if err := worker.Wait(); err != nil {
		t.Fatalf("worker exit: %v\n%s", err, stderr.String())
	}
	if want := "stopped: accepted " + strconv.Itoa(st.Events) + ","; !strings.Contains(summary, want) {
		t.Errorf("summary %q, want %q", summary, want)
	}
}
