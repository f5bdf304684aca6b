package sessionize

import (
	"slices"
	"strconv"
	"strings"

	"github.com/touchledger/touchledger/internal/credit"
	"github.com/touchledger/touchledger/internal/pathstats"
	"github.com/touchledger/touchledger/internal/tally"
)

// Path statistics are provisional: an open session or journey is counted in
// the bucket of its last event as it stands (a journey as not converted).
// When it grows, converts or its last event moves to another bucket, its old
// contribution is subtracted and the new one added in the same batch, so
// every window always reflects every session and journey exactly once. A
// session or journey that simply stops growing keeps its last contribution,
// which is its final one: no timers are needed.
//
// Dims layouts (docs/storage.md):
//
//	ChannelTransitions: order digit | RS | from state | RS | to state   (RS = 0x1e; states use 0x1f inside)
//	Coalitions:         sorted distinct channels joined by 0x1f ("" = conversions without an eligible touch)
//	JourneyPaths:       path key | 0x1f | "conversion" or "null"
//	ActionTransitions:  from | 0x1f | to, with START and END
//	Funnel:             depth reached, decimal
//	SessionPaths:       path key

// RS separates the parts of a channel-transition dims.
const RS = "\x1e"

// Session path markers.
const (
	ActionStart = "START"
	ActionEnd   = "END"
)

// Journey path endings.
const (
	EndConversion = "conversion"
	EndNull       = "null"
)

// journeyAgg adds sign × the aggregates of a journey with the given channel
// path at time at (Unix ns).
func (t *Tracker) journeyAgg(b *tally.Batch, chans []string, converted bool, value int64, at int64, sign int64) {
	if len(chans) == 0 {
		if converted {
			b.Add(tally.Coalitions, at, "", tally.Vec{sign, sign, sign * value})
		}
		return
	}
	for k := 1; k <= t.p.MarkovMaxOrder; k++ {
		t.trans = credit.PathTransitions(t.trans[:0], chans, k, converted, t.p.CollapseRepeats)
		for _, tr := range t.trans {
			b.Add(tally.ChannelTransitions, at, t.orders[k]+tr.From+RS+tr.To, tally.Vec{sign, 0, 0})
		}
	}
	conv, val := int64(0), int64(0)
	end := EndNull
	if converted {
		conv, val, end = sign, sign*value, EndConversion
	}
	t.set = append(t.set[:0], chans...)
	slices.Sort(t.set)
	t.set = slices.Compact(t.set)
	b.Add(tally.Coalitions, at, strings.Join(t.set, tally.Sep), tally.Vec{sign, conv, val})
	b.Add(tally.JourneyPaths, at, pathstats.PathKey(chans, t.p.PathMaxLen)+tally.Sep+end, tally.Vec{sign, conv, val})
}

// openJourneyAgg adds sign × the provisional aggregates of u's open journey.
func (t *Tracker) openJourneyAgg(b *tally.Batch, u *UserState, sign int64) {
	n := len(u.Touches)
	if n == 0 || !t.p.PathStats {
		return
	}
	t.chans = t.chans[:0]
	for _, tc := range u.Touches {
		t.chans = append(t.chans, tc.Channel)
	}
	t.journeyAgg(b, t.chans, false, 0, u.Touches[n-1].Time, sign)
}

// sessionAgg adds sign × the aggregates of u's current session.
func (t *Tracker) sessionAgg(b *tally.Batch, u *UserState, sign int64) {
	if len(u.Path) == 0 || !t.p.PathStats {
		return
	}
	at := u.LastAction
	prev := ActionStart
	for _, a := range u.Path {
		b.Add(tally.ActionTransitions, at, prev+tally.Sep+a, tally.Vec{sign, 0, 0})
		prev = a
	}
	b.Add(tally.ActionTransitions, at, prev+tally.Sep+ActionEnd, tally.Vec{sign, 0, 0})
	depth, v := t.funnelOf(u.Path)
	b.Add(tally.Funnel, at, t.depths[depth], tally.Vec{sign * v[0], sign * v[1], sign * v[2]})
	b.Add(tally.SessionPaths, at, pathstats.PathKey(u.Path, t.p.PathMaxLen), tally.Vec{sign, sign * t.converted(u.Path), 0})
}

// funnelOf returns a session's funnel depth and its Funnel vector
// {1, reached the cart step, reached it and converted}.
func (t *Tracker) funnelOf(path []string) (int, tally.Vec) {
	cart := false
	for _, a := range path {
		if a == t.p.CartStep {
			cart = true
			break
		}
	}
	v := tally.Vec{1, 0, 0}
	if cart {
		v[1] = 1
		v[2] = t.converted(path)
	}
	return pathstats.FunnelDepth(path, t.p.FunnelSteps), v
}

// converted returns 1 if the path holds a conversion action, else 0.
func (t *Tracker) converted(path []string) int64 {
	for _, a := range path {
		if t.conv[a] {
			return 1
		}
	}
	return 0
}

// sessionStep appends action a (at now) to u's session, whose last action
// was at last, and adds the change in its aggregates. The caller has checked
// that both times fall in the same path bucket and that the path has room.
// It equals sessionAgg(−1) before plus sessionAgg(+1) after, with unchanged
// counters left out (the common case: actions minutes apart).
func (t *Tracker) sessionStep(b *tally.Batch, u *UserState, a string, last, now int64) {
	prev := u.Path[len(u.Path)-1]
	b.Add(tally.ActionTransitions, now, prev+tally.Sep+ActionEnd, tally.Vec{-1, 0, 0})
	b.Add(tally.ActionTransitions, now, prev+tally.Sep+a, tally.Vec{1, 0, 0})
	b.Add(tally.ActionTransitions, now, a+tally.Sep+ActionEnd, tally.Vec{1, 0, 0})

	oldPath := u.Path
	oldDepth, oldV := t.funnelOf(oldPath)
	oldConv := t.converted(oldPath)
	u.Path = append(u.Path, a)
	newDepth, newV := t.funnelOf(u.Path)
	if oldDepth != newDepth || oldV != newV || b.BucketOf(tally.Funnel, last) != b.BucketOf(tally.Funnel, now) {
		b.Add(tally.Funnel, last, t.depths[oldDepth], tally.Vec{}.Sub(oldV))
		b.Add(tally.Funnel, now, t.depths[newDepth], newV)
	}
	newConv := t.converted(u.Path)
	if a != prev { // a repeat leaves the collapsed path key unchanged
		b.Add(tally.SessionPaths, now, pathstats.PathKey(oldPath, t.p.PathMaxLen), tally.Vec{-1, -oldConv, 0})
		b.Add(tally.SessionPaths, now, pathstats.PathKey(u.Path, t.p.PathMaxLen), tally.Vec{1, newConv, 0})
	} else if newConv != oldConv {
		b.Add(tally.SessionPaths, now, pathstats.PathKey(u.Path, t.p.PathMaxLen), tally.Vec{0, newConv - oldConv, 0})
	}
}

func (t *Tracker) initAggregates() {
	t.orders = make([]string, t.p.MarkovMaxOrder+1)
	for k := range t.orders {
		t.orders[k] = strconv.Itoa(k) + RS
	}
	t.depths = make([]string, len(t.p.FunnelSteps)+1)
	for d := range t.depths {
		t.depths[d] = strconv.Itoa(d)
	}
}

