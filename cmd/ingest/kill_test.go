package main

import (
	"bytes"
	"context"
	"encoding/json"
	"math/rand"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/credit"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/state"
)

// buildIngest compiles this command into a temporary directory.
func buildIngest(t *testing.T) string {
	t.Helper()
	bin := filepath.Join(t.TempDir(), "ingest")
	cmd := exec.Command("go", "build", "-o", bin, ".")
	cmd.Stderr = os.Stderr
	if err := cmd.Run(); err != nil {
		t.Fatalf("build ingest: %v", err)
	}
	return bin
}

// creditJSON returns every rule model's answer over everything, as JSON.
func creditJSON(t *testing.T, dir string) string {
	t.Helper()
	st, err := state.Open(context.Background(), pipeline.StoreOptions(dir, config.Default()))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	q, err := query.NewQuerier(st, query.ParamsFrom(config.Default()))
	if err != nil {
		t.Fatal(err)
	}
	defer q.Close()
	var all []any
	for _, m := range credit.RuleModels {
		a, err := q.Credit(m.String(), query.ByCampaign, 0, query.Span{Last: 365 * 24 * time.Hour})
		if err != nil {
			t.Fatal(err)
		}
		all = append(all, a)
		s, err := q.Shift(m.String(), 0, 10)
		if err != nil {
			t.Fatal(err)
		}
		all = append(all, s)
	}
	b, _ := json.Marshal(all)
	return string(b)
}

// TestKillAndResume kills a replay with SIGKILL several times at random
// moments, resumes it each time, and expects exactly the state, counts and
// rejects of one clean run (issue 2: exactly once across kill -9).
func TestKillAndResume(t *testing.T) {
	bin := buildIngest(t)
	c := shop.DefaultConfig()
	c.Visitors = 20000
	c.Days = 10
	c.ShiftDay, c.IncidentDay = 5, 8
	var buf bytes.Buffer
	if _, err := shop.Generate(&buf, c); err != nil {
		t.Fatal(err)
	}
	// Mix in junk lines and duplicates so rejects and duplicate counts are
	// exercised across the kills too.
	lines := strings.Split(strings.TrimSpace(buf.String()), "\n")
	var mixed []string
	for i, l := range lines {
		mixed = append(mixed, l)
		if i%1000 == 0 {
			mixed = append(mixed, `{"id":"bad","user":"u","time":"yesterday","kind":"touch","channel":"x"}`)
		}
		if i%777 == 0 {
			mixed = append(mixed, l)
		}
	}
	input := filepath.Join(t.TempDir(), "events.jsonl")
	if err := os.WriteFile(input, []byte(strings.Join(mixed, "\n")+"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	// A small commit size makes many commits, so kills land between and
	// during them.
	cfgFile := filepath.Join(t.TempDir(), "tl.yaml")
	if err := os.WriteFile(cfgFile, []byte("store:\n  commit_events: 3000\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	runOnce := func(dir string, killAfter time.Duration) (done bool, out string) {
		cmd := exec.Command(bin, "--data", dir, "--replay", input, "--config", cfgFile)
		var stdout, stderr bytes.Buffer
		cmd.Stdout, cmd.Stderr = &stdout, &stderr
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		if killAfter > 0 {
			timer := time.AfterFunc(killAfter, func() { cmd.Process.Signal(syscall.SIGKILL) })
			defer timer.Stop()
		}
		err := cmd.Wait()
		if err == nil {
			return true, stdout.String()
		}
		if ee, ok := err.(*exec.ExitError); ok && ee.ProcessState.Sys().(syscall.WaitStatus).Signaled() {
			return false, ""
		}
		t.Fatalf("ingest failed: %v\n%s", err, stderr.String())
		return false, ""
	}
	clean := t.TempDir()
	if ok, _ := runOnce(clean, 0); !ok {
		t.Fatal("clean run did not finish")
	}
	_, cleanSummary := runOnce(clean, 0) // a second run of the same file changes nothing
	want := creditJSON(t, clean)

	killed := t.TempDir()
	rng := rand.New(rand.NewSource(42))
	kills := 0
	var summary string
	for attempt := 0; attempt < 40; attempt++ {
		var after time.Duration
		if kills < 6 {
			after = time.Duration(50+rng.Intn(900)) * time.Millisecond
		}
		done, out := runOnce(killed, after)
		if done {
			summary = out
			break
		}
		kills++
	}
	if kills < 3 {
		t.Fatalf("only %d kills landed before the run finished; the input is too small for this machine", kills)
	}
	t.Logf("killed %d times", kills)
	if got := creditJSON(t, killed); got != want {
		t.Errorf("answers after kills differ from a clean run:\n got %.300s\nwant %.300s", got, want)
	}
	// The summary counts (everything but the elapsed time) match too.
	strip := func(s string) string { return s[:strings.Index(s, "(")] }
	if strip(summary) != strip(cleanSummary) {
		t.Errorf("summary %q, want %q", summary, cleanSummary)
	}
	r1, _ := os.ReadFile(filepath.Join(clean, "rejects.jsonl"))
	r2, _ := os.ReadFile(filepath.Join(killed, "rejects.jsonl"))
	if !bytes.Equal(r1, r2) || len(r1) == 0 {
		t.Errorf("rejects differ after kills (%d vs %d bytes)", len(r1), len(r2))
	}
}
