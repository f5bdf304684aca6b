package query

import (
	"errors"
	"fmt"
	"time"

	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/state"
	"github.com/touchledger/touchledger/internal/tally"
)

// Piece is a run of buckets of one resolution: starts in [From, To), Unix s.
type Piece struct {
	Res      int
	From, To int64
}

// Plan says which buckets answer a window.
type Plan struct {
	Coverage
	Pieces []Piece
}

// Coverage is the span an answer actually covers: [From, To). Rounded says
// that it differs from the window asked for, Rounding why (the bucket size
// at the edges, and retention when finer buckets had expired there). Every
// answer carries it, in JSON and in the table's heading.
type Coverage struct {
	From     time.Time `json:"from"`
	To       time.Time `json:"to"`
	Rounded  bool      `json:"rounded"`
	Rounding string    `json:"rounding,omitempty"`
}

// ErrEmptyWindow is returned for a window that ends before it starts.
var ErrEmptyWindow = errors.New("the window is empty: from must be before to")

// PlanWindow covers [from, to) with as few buckets as possible: the coarsest
// bucket that fits at each point, finer ones at the edges. A resolution holds
// buckets starting at or after watermark − retention (retention 0: all). When
// the edges do not fall on bucket boundaries of a resolution still held
// there, the window is widened outwards to the nearest boundary and Rounded is
// set: the answer names the window it covers.
func PlanWindow(res []state.Resolution, from, to, watermark time.Time) (Plan, error) {
	if !from.Before(to) {
		return Plan{}, ErrEmptyWindow
	}
	steps := make([]int64, len(res))
	for i, r := range res {
		steps[i] = int64(r.Step / time.Second)
	}
	wm := watermark.Unix()
	avail := func(i int, t int64) bool {
		return res[i].Retention == 0 || t >= wm-int64(res[i].Retention/time.Second)
	}
	finestAt := func(t int64) int {
		for i := range res {
			if avail(i, tally.FloorDiv(t, steps[i])*steps[i]) {
				return i
			}
		}
		return len(res) - 1
	}
	start := from.Unix() // floor: Time keeps nanoseconds in [0, 1e9)
	r0 := finestAt(start)
	s0 := steps[r0]
	start = tally.FloorDiv(start, s0) * s0
	end := to.Unix()
	if to.Nanosecond() != 0 {
		end++
	}
	if e := steps[0]; end%e != 0 {
		end = (tally.FloorDiv(end, e) + 1) * e
	}
	p := Plan{}
	t := start
	for t < end {
		pick := -1
		for i := len(res) - 1; i >= 0; i-- {
			if t%steps[i] == 0 && t+steps[i] <= end && avail(i, t) {
				pick = i
				break
			}
		}
		if pick < 0 {
			// The fine buckets needed here have expired: widen to the
			// finest held resolution.
			pick = finestAt(t)
			if t%steps[pick] != 0 {
				return Plan{}, fmt.Errorf("query: cannot align window at %s", time.Unix(t, 0).UTC())
			}
			end = t + steps[pick]
		}
		n := len(p.Pieces)
		if n > 0 && p.Pieces[n-1].Res == pick && p.Pieces[n-1].To == t {
			p.Pieces[n-1].To = t + steps[pick]
		} else {
			p.Pieces = append(p.Pieces, Piece{Res: pick, From: t, To: t + steps[pick]})
		}
		t += steps[pick]
	}
	p.From, p.To = time.Unix(start, 0).UTC(), time.Unix(end, 0).UTC()
	p.Rounded = !p.From.Equal(from) || !p.To.Equal(to)
	if p.Rounded {
		p.Rounding = roundingReason(res, r0, p.Pieces[len(p.Pieces)-1].Res, !p.From.Equal(from), !p.To.Equal(to))
	}
	return p, nil
}

// roundingReason says why a plan's edges moved: the start falls on a bucket
// edge of resolution r0, the end on one of rEnd (coarser than the finest
// when finer buckets had expired there).
func roundingReason(res []state.Resolution, r0, rEnd int, start, end bool) string {
	var why string
	switch {
	case start && end && r0 == rEnd:
		why = "start and end moved out to " + res[r0].Name + " bucket edges"
	case start && end:
		why = "start moved back to a " + res[r0].Name + " bucket edge, end on to a " + res[rEnd].Name + " one"
	case start:
		why = "start moved back to a " + res[r0].Name + " bucket edge"
	default:
		why = "end moved on to a " + res[rEnd].Name + " bucket edge"
	}
	if r := max(r0, rEnd); r > 0 && (start && r0 == r || end && rEnd == r) {
		why += fmt.Sprintf(" (retention: %s buckets are kept %s)", res[r-1].Name, config.Duration(res[r-1].Retention))
	}
	return why
}

// Sum adds family f over the plan's buckets into a new table.
func Sum(r *state.Reader, p Plan, f tally.Family) (tally.Table, error) {
	t := make(tally.Table)
	for _, pc := range p.Pieces {
		if err := r.Sum(pc.Res, f, pc.From, pc.To, t); err != nil {
			return nil, err
		}
	}
	return t, nil
}
