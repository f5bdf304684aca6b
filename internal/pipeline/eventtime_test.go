package pipeline

import (
	"context"
	"encoding/json"
	"strings"
	"testing"
	"time"

	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/state"
)

// TestQuietInputKeepsLatestEvent: while live input is quiet, Tick lets the
// watermark follow the wall clock (sessions close), but the latest event
// time answers end at stays the largest event time seen, so no answer
// shows days after the last event (issue: a cliff to zero on the latest
// day). The rule is this project's (event time only), checked against the
// input's own largest time.
func TestQuietInputKeepsLatestEvent(t *testing.T) {
	input := demoInput(t, 300, 3)
	lines := strings.Split(strings.TrimSpace(string(input)), "\n")
	var last time.Time
	for _, l := range lines {
		var e struct{ Time time.Time }
		if err := json.Unmarshal([]byte(l), &e); err != nil {
			t.Fatal(err)
		}
		if e.Time.After(last) {
			last = e.Time
		}
	}
	ctx := context.Background()
	st, err := state.Open(ctx, state.DefaultOptions(t.TempDir()))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	cfg := testConfig()
	cfg.PersistPending = true
	p, err := New(st, cfg, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := p.Begin("bus"); err != nil {
		t.Fatal(err)
	}
	for i, l := range lines {
		if err := p.Offer(ctx, uint64(i+1), []byte(l)); err != nil {
			t.Fatal(err)
		}
	}
	// Three quiet days pass on the wall clock.
	if err := p.Tick(ctx, time.Now().Add(72*time.Hour)); err != nil {
		t.Fatal(err)
	}
	if err := p.Finish(ctx, false); err != nil {
		t.Fatal(err)
	}
	if wm := p.Status().Watermark; !wm.After(last.Add(48 * time.Hour)) {
		t.Fatalf("watermark %s did not follow the quiet wall clock past %s", wm, last)
	}
	if err := p.Close(); err != nil {
		t.Fatal(err)
	}
	q, err := query.NewQuerier(st, query.ParamsFrom(config.Default()))
	if err != nil {
		t.Fatal(err)
	}
	defer q.Close()
	if !q.Latest().Equal(last.UTC()) {
		t.Errorf("latest event %s, want the largest event time of the input %s", q.Latest(), last.UTC())
	}
	a, err := q.Answer(query.Request{Kind: query.KindShift, Model: "linear", Days: 5})
	if err != nil {
		t.Fatal(err)
	}
	days := a.Shift.Days
	if got, want := days[len(days)-1].Day, last.UTC().Format("2006-01-02"); got != want {
		t.Errorf("shift ends on %s, want the last event's day %s", got, want)
	}
	if days[len(days)-1].Conversions == 0 {
		t.Errorf("the last day shown has no conversions: %+v", days[len(days)-1])
	}
}

// TestInjectedClock: the processor's wall clock is Config.Now: a commit
// falls due when the injected clock has passed the commit interval, not
// the real one (this project's rule: commit by size or time).
func TestInjectedClock(t *testing.T) {
	lines := strings.Split(strings.TrimSpace(string(demoInput(t, 20, 1))), "\n")
	ctx := context.Background()
	st, err := state.Open(ctx, state.DefaultOptions(t.TempDir()))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	now := time.Date(2026, 12, 1, 0, 0, 0, 0, time.UTC)
	cfg := testConfig()
	cfg.PersistPending = true
	cfg.CommitInterval = time.Hour
	cfg.Now = func() time.Time { return now }
	p, err := New(st, cfg, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	if _, err := p.Begin("bus"); err != nil {
		t.Fatal(err)
	}
	for i, l := range lines {
		if err := p.Offer(ctx, uint64(i+1), []byte(l)); err != nil {
			t.Fatal(err)
		}
	}
	now = now.Add(59 * time.Minute)
	if err := p.Tick(ctx, now); err != nil {
		t.Fatal(err)
	}
	if c := p.Status().Commits; c != 0 {
		t.Fatalf("%d commits 59 injected minutes after the start, want 0 (interval 1h)", c)
	}
	now = now.Add(2 * time.Minute)
	if err := p.Tick(ctx, now); err != nil {
		t.Fatal(err)
	}
	deadline := time.Now().Add(10 * time.Second)
	for p.Status().Commits == 0 {
		if time.Now().After(deadline) {
			t.Fatal("no commit once the injected clock passed the commit interval")
		}
		time.Sleep(5 * time.Millisecond)
	}
	if got := p.Status().LastCommit; !got.Equal(now) {
		t.Errorf("last commit at %s, want the injected clock's %s", got, now)
	}
}
