package pipeline

import (
	"bytes"
	"context"
	"encoding/json"
	"path/filepath"
	"strings"
	"testing"

	"github.com/touchledger/touchledger/internal/state"
)

// TestPersistPendingResume: with PersistPending (live input), a processor
// that stops without finishing, at a commit with events still buffered,
// resumes from the store alone — the input before its checkpoint is never
// offered again — and ends in the same state as one uninterrupted run.
func TestPersistPendingResume(t *testing.T) {
	input := demoInput(t, 800, 4)
	lines := strings.Split(strings.TrimSpace(string(input)), "\n")
	cfg := testConfig()
	cfg.PersistPending = true
	cfg.CommitEvents = 700
	ctx := context.Background()

	run := func(dir string, lines []string, first uint64, finish bool) Checkpoint {
		st, err := state.Open(ctx, state.DefaultOptions(dir))
		if err != nil {
			t.Fatal(err)
		}
		defer st.Close()
		rf, err := OpenRejectFile(filepath.Join(dir, "rejects.jsonl"))
		if err != nil {
			t.Fatal(err)
		}
		defer rf.Close()
		var acked uint64
		c := cfg
		c.OnCommit = func(_ string, cp Checkpoint) { acked = cp.Next }
		p, err := New(st, c, rf, nil)
		if err != nil {
			t.Fatal(err)
		}
		cp, err := p.Begin("bus")
		if err != nil {
			t.Fatal(err)
		}
		for i, l := range lines {
			pos := first + uint64(i)
			if pos < cp.Next {
				continue // acknowledged: the bus will not deliver it again
			}
			if err := p.Offer(ctx, pos, []byte(l)); err != nil {
				t.Fatal(err)
			}
		}
		if finish {
			if err := p.Finish(ctx, true); err != nil {
				t.Fatal(err)
			}
		} else if err := p.commit(ctx, true); err != nil { // a commit with events buffered, then a stop
			t.Fatal(err)
		}
		if err := p.Close(); err != nil {
			t.Fatal(err)
		}
		if acked == 0 {
			t.Fatal("OnCommit was not called")
		}
		return p.ckpt
	}
	clean, cut := t.TempDir(), t.TempDir()
	run(clean, lines, 1, true)
	half := len(lines) / 2
	cp1 := run(cut, lines[:half], 1, false)
	if cp1.Next != uint64(half)+1 {
		t.Fatalf("checkpoint next = %d, want %d", cp1.Next, half+1)
	}
	st, _ := state.Open(ctx, state.DefaultOptions(cut))
	r := st.NewReader()
	n := 0
	r.Pending("bus", func(uint64, []byte) error { n++; return nil })
	r.Discard()
	st.Close()
	if n == 0 {
		t.Fatal("no buffered events were persisted at the cut: the test proves nothing")
	}
	// Resume: the bus redelivers everything after the acknowledged position.
	run(cut, lines, 1, true)
	a, b := answers(t, clean), answers(t, cut)
	ja, _ := json.Marshal(a)
	jb, _ := json.Marshal(b)
	if !bytes.Equal(ja, jb) {
		t.Errorf("answers differ after resuming from persisted buffered events")
	}
	t.Logf("%d events were buffered at the cut", n)
}
