package demo_test

import (
	"bytes"
	"context"
	"testing"
	"time"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/state"
)

// TestDemoStory (issue 5): the default demo world, replayed with the demo's
// configuration, shows its two stories — the checkout outage opens an
// abandonment alert within two intervals of its start and closes after it
// ends, and the budget shift from search_ads to social_ads appears in
// `query shift`.
func TestDemoStory(t *testing.T) {
	if testing.Short() {
		t.Skip("replays the full demo")
	}
	c := shop.DefaultConfig()
	var buf bytes.Buffer
	if _, err := shop.Generate(&buf, c); err != nil {
		t.Fatal(err)
	}
	cfg, err := config.Load("touchledger.yaml")
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	dir := t.TempDir()
	st, err := state.Open(ctx, pipeline.StoreOptions(dir, cfg))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	p, err := pipeline.New(st, pipeline.FromConfig(cfg), nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := pipeline.Replay(ctx, p, "demo", &buf, cfg.Limits.MaxPayload); err != nil {
		t.Fatal(err)
	}
	p.Close()
	q, err := query.NewQuerier(st, query.ParamsFrom(cfg))
	if err != nil {
		t.Fatal(err)
	}
	defer q.Close()

	start := c.Start.AddDate(0, 0, c.IncidentDay).Add(c.IncidentStart)
	end := start.Add(c.IncidentLength)
	iv := cfg.Alert.Interval.D()
	a, err := q.Alerts(query.Span{From: start.Add(-6 * time.Hour), To: start.Add(6 * time.Hour)}, false)
	if err != nil {
		t.Fatal(err)
	}
	found := false
	for _, al := range a.Alerts {
		opened, closed := al.Opened, al.Closed
		if opened.Before(start) || opened.After(start.Add(2*iv)) {
			continue
		}
		found = true
		if al.Open || !closed.After(end) {
			t.Errorf("alert %+v: want it closed after the outage ends at %s", al, end)
		}
		t.Logf("outage %s–%s: alert opened %s, closed %s (rate %.2f, baseline %.2f)", start.Format("15:04"), end.Format("15:04"), al.Opened, al.Closed, al.Rate, al.Baseline)
	}
	if !found {
		t.Errorf("no alert opened within two %s intervals of the outage at %s: %+v", iv, start, a.Alerts)
	}

	sh, err := q.Shift("linear", 0, c.Days)
	if err != nil {
		t.Fatal(err)
	}
	// The first day has no day before it: its changes are unknown (nil,
	// JSON null), every later day's are known.
	for i, d := range sh.Days {
		for _, cell := range d.Channels {
			if (cell.Change == nil) != (i == 0) || (cell.ShareChange == nil) != (i == 0) {
				t.Errorf("shift day %s (index %d) %s: change %v, share change %v; want nil exactly on the first day", d.Day, i, cell.Channel, cell.Change, cell.ShareChange)
			}
		}
	}
	share := func(from, to int, ch string) float64 {
		var num, den float64
		for _, d := range sh.Days[from:to] {
			for _, cell := range d.Channels {
				den += cell.Conversions
				if cell.Channel == ch {
					num += cell.Conversions
				}
			}
		}
		return num / den
	}
	n := len(sh.Days)
	shiftAt := c.ShiftDay - (c.Days - n)
	beforeS, afterS := share(0, shiftAt, "search_ads"), share(shiftAt+1, n, "search_ads")
	beforeC, afterC := share(0, shiftAt, "social_ads"), share(shiftAt+1, n, "social_ads")
	if !(afterS < beforeS && afterC > beforeC) {
		t.Errorf("budget shift not visible: search_ads %.3f → %.3f, social_ads %.3f → %.3f", beforeS, afterS, beforeC, afterC)
	}
	t.Logf("shift: search_ads %.3f → %.3f, social_ads %.3f → %.3f", beforeS, afterS, beforeC, afterC)
}
