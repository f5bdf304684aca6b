package sessionize

import (
	"strings"

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
// Whole paths are stored; everything else is derived from them at query
// time (transitions of any Markov order, channel sets, display keys), so an
// event changes at most two path counters:
//
//	JourneyPaths: channels joined by 0x1f ("" = a conversion with no eligible touch)
//	              Vec = {journeys, conversions, value micro-units}
//	SessionPaths: actions joined by 0x1f. Vec = {sessions, converted sessions, 0}
//	Funnel:       depth reached, decimal (finest buckets, for alerts)
//	              Vec = {sessions, sessions reaching the basket step, of those converted}

// journeyAgg adds sign × the aggregates of a journey with the given channel
// path at time at (Unix ns).
func (t *Tracker) journeyAgg(b *tally.Batch, chans []string, converted bool, value int64, at int64, sign int64) {
	v := tally.Vec{sign, 0, 0}
	if converted {
		v[1], v[2] = sign, sign*value
	}
	if len(chans) == 0 && !converted {
		return
	}
	b.Add(tally.JourneyPaths, at, strings.Join(chans, tally.Sep), v)
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
	depth, v := t.funnelOf(u.Path)
	b.Add(tally.Funnel, at, t.depths[depth], tally.Vec{sign * v[0], sign * v[1], sign * v[2]})
	b.Add(tally.SessionPaths, at, strings.Join(u.Path, tally.Sep), tally.Vec{sign, sign * t.converted(u.Path), 0})
}

// funnelOf returns a session's funnel depth and its Funnel vector
// {1, reached the basket step, reached it and converted}.
func (t *Tracker) funnelOf(path []string) (int, tally.Vec) {
	basket := false
	for _, a := range path {
		if a == t.p.BasketStep {
			basket = true
			break
		}
	}
	v := tally.Vec{1, 0, 0}
	if basket {
		v[1] = 1
		v[2] = t.converted(path)
	}
	return pathstats.FunnelDepth(path, t.p.FunnelSteps), v
}

// converted returns 1 if the path holds a goal action, else 0.
func (t *Tracker) converted(path []string) int64 {
	for _, a := range path {
		if t.conv[a] {
			return 1
		}
	}
	return 0
}

// sessionStep appends action a (at now) to u's session, whose last action
// was at last, and adds the change in its aggregates. It equals
// sessionAgg(−1) before plus sessionAgg(+1) after, with unchanged counters
// left out (the common case: the funnel stays put within its bucket).
func (t *Tracker) sessionStep(b *tally.Batch, u *UserState, a string, last, now int64) {
	oldDepth, oldV := t.funnelOf(u.Path)
	oldConv := t.converted(u.Path)
	b.Add(tally.SessionPaths, last, strings.Join(u.Path, tally.Sep), tally.Vec{-1, -oldConv, 0})
	u.Path = append(u.Path, a)
	newDepth, newV := t.funnelOf(u.Path)
	if oldDepth != newDepth || oldV != newV || b.BucketOf(tally.Funnel, last) != b.BucketOf(tally.Funnel, now) {
		b.Add(tally.Funnel, last, t.depths[oldDepth], tally.Vec{}.Sub(oldV))
		b.Add(tally.Funnel, now, t.depths[newDepth], newV)
	}
	b.Add(tally.SessionPaths, now, strings.Join(u.Path, tally.Sep), tally.Vec{1, t.converted(u.Path), 0})
}

func (t *Tracker) initAggregates() {
	t.depths = make([]string, len(t.p.FunnelSteps)+1)
	for d := range t.depths {
		t.depths[d] = string(rune('0' + d%10))
		if d >= 10 {
			t.depths[d] = itoa(d)
		}
	}
}

func itoa(n int) string {
	if n < 10 {
		return string(rune('0' + n))
	}
	return itoa(n/10) + string(rune('0'+n%10))
}
