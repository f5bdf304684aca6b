package pipeline

import (
	"context"
	"fmt"
	"strings"
	"testing"
	"time"

	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/state"
)

// TestAbandonmentSpikeOpensAlert replays sessions whose basket abandonment per
// 5-minute interval follows the spike example of docs/references.md §5
// ([computed]; EWMA after Roberts 1959 and NIST/SEMATECH §6.3.2.4, binomial
// limits after NIST §6.3.3.2): 400 basket sessions per interval, baseline
// 10 %, then 40, 44, 36, 48, 56, 64 abandons (10 % → 16 %). With λ = 0.2 and
// L = 3 the chart first crosses its limit at the sixth interval
// (z_6 = 0.120755 > UCL 0.114475), so the alert must open exactly there, and
// close after three quiet intervals once abandonment is back at 10 %.
func TestAbandonmentSpikeOpensAlert(t *testing.T) {
	base := time.Date(2026, 3, 2, 10, 0, 0, 0, time.UTC)
	abandons := []int{40, 40, 40, 44, 36, 48, 56, 64, 40, 40, 40, 40, 40, 40}
	const first = 2 // index of the §5 sequence's first interval
	var lines []string
	id := 0
	emit := func(user string, at time.Time, action string) {
		id++
		lines = append(lines, fmt.Sprintf(`{"id":"e%d","user":"%s","time":"%s","kind":"action","action":"%s"}`,
			id, user, at.Format(time.RFC3339Nano), action))
	}
	for i, ab := range abandons {
		start := base.Add(time.Duration(i) * 5 * time.Minute)
		for s := 0; s < 400; s++ {
			u := fmt.Sprintf("u%d-%d", i, s)
			at := start.Add(time.Duration(s) * 600 * time.Millisecond)
			emit(u, at, "product_view")
			emit(u, at.Add(time.Second), "basket_add")
			if s >= ab { // the first `ab` sessions abandon
				emit(u, at.Add(2*time.Second), "checkout")
				emit(u, at.Add(3*time.Second), "order")
			}
		}
	}
	c := config.Default()
	c.Alert.Target = 0.10
	c.Alert.Step = "basket_add" // basket sessions that do not buy
	dir := t.TempDir()
	cp := replayBytes(t, dir, FromConfig(c), "spike", []byte(strings.Join(lines, "\n")))
	if cp.Counts.Accepted != uint64(len(lines)) {
		t.Fatalf("accepted %d of %d", cp.Counts.Accepted, len(lines))
	}
	st, err := state.Open(context.Background(), StoreOptions(dir, c))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	q, err := query.NewQuerier(st, query.ParamsFrom(c))
	if err != nil {
		t.Fatal(err)
	}
	defer q.Close()
	a, err := q.Alerts(query.Span{From: base, To: base.Add(time.Duration(len(abandons)) * 5 * time.Minute)}, true)
	if err != nil {
		t.Fatal(err)
	}
	if len(a.Alerts) != 1 {
		t.Fatalf("alerts = %+v, want exactly one", a.Alerts)
	}
	al := a.Alerts[0]
	wantOpen := base.Add(time.Duration(first+5) * 5 * time.Minute)
	if !al.Opened.Equal(wantOpen) {
		t.Errorf("alert opened %s, want %s (the sixth interval of the spike)", al.Opened, query.FormatTime(wantOpen))
	}
	// z falls back below the limit two intervals after the spike (§5 z_7 =
	// 0.1166 is still above it), so the last alerting interval is the one
	// after the opening one; the alert closes at its end, once three quiet
	// intervals (close_after) have confirmed it.
	if wantClose := base.Add(time.Duration(first+7) * 5 * time.Minute); al.Open || !al.Closed.Equal(wantClose) {
		t.Errorf("alert closed %v (open %v), want %s", al.Closed, al.Open, query.FormatTime(wantClose))
	}
	if al.Rate != 0.16 || al.Baseline != 0.10 {
		t.Errorf("rate %v baseline %v, want 0.16 and 0.10", al.Rate, al.Baseline)
	}
	// The limit at the opening interval: §5 time-varying UCL_6 = 0.114475
	// ([computed]) when the chart starts at the spike; our chart has two
	// quiet intervals before it, so its limit lies between UCL_6 and the
	// asymptotic 0.115.
	if al.Limit < 0.114475-1e-6 || al.Limit > 0.115+1e-9 {
		t.Errorf("limit %v, want within [0.114475, 0.115]", al.Limit)
	}
	for _, p := range a.Points {
		if p.Sessions != 400 {
			t.Errorf("interval %s: %d basket sessions, want 400", p.Start, p.Sessions)
		}
	}
	t.Logf("alert %+v", al)
}
