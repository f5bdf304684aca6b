package main

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/state"
)

// TestClockRepair: a directory whose clock an old version let one event
// move to 2200 (written here directly) is shown as such by `ingest clock`,
// refused a repair without --repair, and repaired with it; events replayed
// afterwards are accepted, not late (issue 9 item 2).
func TestClockRepair(t *testing.T) {
	tmp := t.TempDir()
	dir := filepath.Join(tmp, "data")
	events := func(name string, day int) string {
		var b strings.Builder
		for i := range 20 {
			ts := time.Date(2026, 10, day, 10, i, 0, 0, time.UTC)
			fmt.Fprintf(&b, `{"id":"%s%d","user":"u%d","time":"%s","kind":"action","action":"x"}`+"\n", name, i, i%3, ts.Format(time.RFC3339))
		}
		p := filepath.Join(tmp, name+".jsonl")
		if err := os.WriteFile(p, []byte(b.String()), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	var out, errb bytes.Buffer
	if code := run([]string{"--data", dir, "--replay", events("a", 1)}, &out, &errb); code != 0 {
		t.Fatalf("replay: %d %s", code, errb.String())
	}
	// The poison, as the old code committed it.
	poison := time.Date(2200, 1, 1, 0, 0, 0, 0, time.UTC).UnixNano()
	st, err := state.Open(context.Background(), pipeline.StoreOptions(dir, config.Default()))
	if err != nil {
		t.Fatal(err)
	}
	if _, err := st.Commit(context.Background(), &state.Commit{Meta: state.Meta{Watermark: &state.Watermark{MaxSeen: poison, Floor: poison - int64(5*time.Minute)}}}); err != nil {
		t.Fatal(err)
	}
	st.Close()

	out.Reset()
	if code := run([]string{"clock", "--data", dir}, &out, &errb); code != 0 {
		t.Fatalf("clock: %d %s", code, errb.String())
	}
	if s := out.String(); !strings.Contains(s, "latest event 2200-01-01T00:00:00Z") || !strings.Contains(s, "warning: the latest event time is ahead of the wall clock") {
		t.Errorf("clock output %q: want the poisoned time and a warning", s)
	}
	errb.Reset()
	if code := run([]string{"clock", "--data", dir, "--set-latest", "2026-10-01T10:19:00Z"}, &out, &errb); code != 2 || !strings.Contains(errb.String(), "--repair") {
		t.Errorf("set without --repair: exit %d, %q", code, errb.String())
	}
	out.Reset()
	if code := run([]string{"clock", "--data", dir, "--set-latest", "2026-10-01T10:19:00Z", "--repair"}, &out, &errb); code != 0 {
		t.Fatalf("repair: %d %s", code, errb.String())
	}
	if s := out.String(); !strings.Contains(s, "repaired: latest event 2026-10-01T10:19:00Z, floor 2026-10-01T10:19:00Z, watermark 2026-10-01T10:19:00Z") {
		t.Errorf("repair output %q", s)
	}
	out.Reset()
	if code := run([]string{"--data", dir, "--replay", events("b", 2)}, &out, &errb); code != 0 {
		t.Fatalf("replay after repair: %d %s", code, errb.String())
	}
	if s := out.String(); !strings.Contains(s, "accepted 20, duplicate 0, rejected 0, late 0") {
		t.Errorf("replay after repair: %q, want 20 accepted, 0 late", s)
	}
	if code := run([]string{"clock", "--data", filepath.Join(tmp, "missing")}, &out, &errb); code != 1 {
		t.Errorf("clock on a missing directory: exit %d, want 1", code)
	}
	if _, err := os.Stat(filepath.Join(tmp, "missing")); !os.IsNotExist(err) {
		t.Errorf("clock created the missing directory")
	}
}
