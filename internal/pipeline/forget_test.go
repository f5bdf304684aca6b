package pipeline

import (
	"bytes"
	"context"
	"encoding/json"
	"path/filepath"
	"regexp"
	"testing"
	"time"

	"github.com/touchledger/touchledger/internal/privacy"
	"github.com/touchledger/touchledger/internal/state"
)

// TestForget (issue 6): after Forget no key of that person remains (scanned
// by pseudonym), an event for them arriving right afterwards is dropped and
// does not recreate their state, and the aggregate answers are unchanged.
func TestForget(t *testing.T) {
	input := demoInput(t, 500, 3)
	victim := regexp.MustCompile(`"user":"([^"]+)"`).FindSubmatch(input)[1]
	ps, _ := privacy.New(bytes.Repeat([]byte{9}, 32), 1)
	cfg := testConfig()
	cfg.Pseudonyms = ps
	dir := t.TempDir()
	replayBytes(t, dir, cfg, "in", input)
	before, _ := json.Marshal(answers(t, dir))

	ctx := context.Background()
	st, err := state.Open(ctx, state.DefaultOptions(dir))
	if err != nil {
		t.Fatal(err)
	}
	rf, _ := OpenRejectFile(filepath.Join(dir, "rejects.jsonl"))
	p, err := New(st, cfg, rf, nil)
	if err != nil {
		t.Fatal(err)
	}
	pseudo := ps.Pseudonym(string(victim))
	has := func() bool {
		r := st.NewReader()
		defer r.Discard()
		b, err := r.User(pseudo)
		if err != nil {
			t.Fatal(err)
		}
		return b != nil
	}
	if !has() {
		t.Fatal("victim has no stored state before erasure: the test proves nothing")
	}
	rep, err := p.Forget(ctx, string(victim))
	if err != nil {
		t.Fatal(err)
	}
	if !rep.HadState || rep.User != pseudo || has() {
		t.Fatalf("report %+v, state still stored: %v", rep, has())
	}
	// A late copy arrives: it must not recreate the state.
	if _, err := p.Begin("late"); err != nil {
		t.Fatal(err)
	}
	// At the latest event time seen, so it is not late and the query windows
	// (which end at the latest event) stay the same.
	r := st.NewReader()
	latest, _, _, _ := r.Watermark()
	r.Discard()
	at := time.Unix(0, latest).UTC().Format(time.RFC3339Nano)
	line := []byte(`{"id":"after-erasure","user":"` + string(victim) + `","time":"` + at + `","kind":"touch","channel":"newsletter"}`)
	if err := p.Offer(ctx, 1, line); err != nil {
		t.Fatal(err)
	}
	if err := p.Finish(ctx, true); err != nil {
		t.Fatal(err)
	}
	if got := p.Counts(); got.Erased != 1 || got.Accepted != 0 {
		t.Errorf("counts after a post-erasure event = %+v, want 1 erased, 0 accepted", got)
	}
	p.Close()
	if has() {
		t.Error("the late event recreated the erased state")
	}
	rf.Close()
	st.Close()
	// Answers over the original window are unchanged (counters stay).
	st2, _ := state.Open(ctx, state.DefaultOptions(dir))
	st2.Close()
	after, _ := json.Marshal(answers(t, dir))
	if !bytes.Equal(before, after) {
		t.Error("aggregate answers changed after erasure")
	}
}
