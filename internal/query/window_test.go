package query

import (
	"testing"
	"time"

	"github.com/touchledger/touchledger/internal/state"
)

func ts(s string) time.Time {
	t, err := time.Parse(time.RFC3339, s)
	if err != nil {
		panic(err)
	}
	return t
}

// TestPlanWindow: a window is covered by the coarsest buckets that fit, finer
// ones at the edges, widened where fine buckets have expired (the rule is
// common practice, no source; docs/references.md §7).
func TestPlanWindow(t *testing.T) {
	res := []state.Resolution{
		{Name: "5m", Step: 5 * time.Minute, Retention: 14 * 24 * time.Hour}, // a non-default finest step on purpose
		{Name: "hour", Step: time.Hour, Retention: 90 * 24 * time.Hour},
		{Name: "day", Step: 24 * time.Hour},
	}
	wm := ts("2026-10-28T12:34:56Z")
	cases := []struct {
		name             string
		from, to         string
		wantFrom, wantTo string
		pieces           int
		rounded          bool
		why              string
	}{
		{"whole days", "2026-10-20T00:00:00Z", "2026-10-25T00:00:00Z", "2026-10-20T00:00:00Z", "2026-10-25T00:00:00Z", 1, false, ""},
		{"day plus hours plus 5m edges", "2026-10-20T22:55:00Z", "2026-10-22T01:10:00Z", "2026-10-20T22:55:00Z", "2026-10-22T01:10:00Z", 5, false, ""},
		{"unaligned edges widen to 5m", "2026-10-27T10:01:00Z", "2026-10-27T10:14:00Z", "2026-10-27T10:00:00Z", "2026-10-27T10:15:00Z", 1, true, "start and end moved out to 5m bucket edges"},
		{"5m expired: widened to hours", "2026-09-20T10:05:00Z", "2026-09-20T12:10:00Z", "2026-09-20T10:00:00Z", "2026-09-20T13:00:00Z", 1, true, "start and end moved out to hour bucket edges (retention: 5m buckets are kept 14d)"},
		{"hours expired: widened to days", "2026-01-05T10:00:00Z", "2026-01-06T12:00:00Z", "2026-01-05T00:00:00Z", "2026-01-07T00:00:00Z", 1, true, "start and end moved out to day bucket edges (retention: hour buckets are kept 90d)"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			p, err := PlanWindow(res, ts(c.from), ts(c.to), wm)
			if err != nil {
				t.Fatal(err)
			}
			if got := FormatTime(p.From); got != c.wantFrom {
				t.Errorf("from = %s, want %s", got, c.wantFrom)
			}
			if got := FormatTime(p.To); got != c.wantTo {
				t.Errorf("to = %s, want %s", got, c.wantTo)
			}
			if p.Rounding != c.why {
				t.Errorf("rounding %q, want %q", p.Rounding, c.why)
			}
			if len(p.Pieces) != c.pieces || p.Rounded != c.rounded {
				t.Errorf("pieces = %+v rounded %v, want %d pieces rounded %v", p.Pieces, p.Rounded, c.pieces, c.rounded)
			}
			// Pieces are contiguous and bucket-aligned.
			at := p.From.Unix()
			for _, pc := range p.Pieces {
				step := int64(res[pc.Res].Step / time.Second)
				if pc.From != at || pc.From%step != 0 || pc.To%step != 0 {
					t.Errorf("piece %+v not contiguous/aligned at %d", pc, at)
				}
				at = pc.To
			}
			if at != p.To.Unix() {
				t.Errorf("pieces end at %d, want %d", at, p.To.Unix())
			}
		})
	}
	if _, err := PlanWindow(res, ts(cases[0].to), ts(cases[0].from), wm); err == nil {
		t.Error("reversed window accepted")
	}
}
