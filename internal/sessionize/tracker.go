package sessionize

import (
	"fmt"
	"time"

	"github.com/touchledger/touchledger/internal/credit"
	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/tally"
)

// NanoPerConversion is the number of stored credit units per conversion:
// fractional credit is kept as integer nano-conversions so that sums are exact.
const NanoPerConversion = 1_000_000_000

// Params are the rules the tracker applies. All durations are event time.
type Params struct {
	SessionGap     time.Duration // an action whose gap to the previous one is >= this starts a new session
	ClickLookback  time.Duration // a click is eligible if conversion time − touch time <= this
	ViewLookback   time.Duration // a view is eligible if conversion time − touch time <= this
	JourneyTimeout time.Duration // a journey whose last touch is more than this before the next touch or conversion has ended
	DedupHorizon   time.Duration // event ids are remembered this long (event time)
	Conversions    []string      // actions that are conversions
	Credit         credit.Params // model parameters, including the direct channel's name
	MaxPath        int           // actions of a session kept in state (later ones are counted, not kept)
	MaxTouches     int           // touches of an open journey kept in state (the oldest are dropped)

	// Path statistics (see aggregates.go). PathStats false skips them.
	PathStats   bool
	FunnelSteps []string // ordered funnel steps (in-order funnel)
	BasketStep  string   // sessions reaching it count towards basket abandonment
}

// Validate reports the first invalid parameter.
func (p Params) Validate() error {
	switch {
	case p.SessionGap <= 0:
		return fmt.Errorf("session gap must be positive, got %v", p.SessionGap)
	case p.ClickLookback <= 0 || p.ViewLookback <= 0:
		return fmt.Errorf("look-back windows must be positive")
	case p.JourneyTimeout <= 0:
		return fmt.Errorf("journey timeout must be positive, got %v", p.JourneyTimeout)
	case p.DedupHorizon <= 0:
		return fmt.Errorf("de-duplication horizon must be positive, got %v", p.DedupHorizon)
	case len(p.Conversions) == 0:
		return fmt.Errorf("at least one goal action is needed")
	case p.Credit.Direct == "":
		return fmt.Errorf("the direct channel needs a name")
	case p.MaxPath <= 0 || p.MaxTouches <= 0:
		return fmt.Errorf("path and touch limits must be positive")
	case p.PathStats && len(p.FunnelSteps) == 0:
		return fmt.Errorf("path statistics need funnel steps")
	}
	return nil
}

// Tracker applies events, in event-time order, to user states and records the
// resulting counter deltas in a tally.Batch. It does no I/O and keeps no
// per-user memory of its own. Not safe for concurrent use.
type Tracker struct {
	p        Params
	conv     map[string]bool
	touches  []credit.Touch
	eligible []Touch
	weights  []float64
	nano     []int64
	value    []int64
	models   []string // model names, index = credit.Model
	chans    []string
	depths   []string // decimal funnel depths
}

// NewTracker returns a tracker for p.
func NewTracker(p Params) (*Tracker, error) {
	if err := p.Validate(); err != nil {
		return nil, err
	}
	t := &Tracker{p: p, conv: make(map[string]bool)}
	for _, a := range p.Conversions {
		t.conv[a] = true
	}
	t.models = make([]string, len(credit.RuleModels))
	for _, m := range credit.RuleModels {
		t.models[m] = m.String()
	}
	t.initAggregates()
	return t, nil
}

// Params returns the tracker's parameters.
func (t *Tracker) Params() Params { return t.p }

// IsConversion reports whether action is a conversion.
func (t *Tracker) IsConversion(action string) bool { return t.conv[action] }

// Apply applies e (which must not be earlier than any event applied to u
// before) to u and adds its effects to b. It returns false, changing
// nothing, when e's id (hash idHash) was already accepted for this user within
// the de-duplication horizon.
func (t *Tracker) Apply(u *UserState, e *event.Event, idHash uint64, b *tally.Batch) bool {
	now := e.Time.UnixNano()
	// Forget ids older than the horizon, then check for a duplicate.
	cut := now - int64(t.p.DedupHorizon)
	drop := 0
	for drop < len(u.Seen) && u.Seen[drop].Time < cut {
		drop++
	}
	if drop > 0 {
		u.Seen = append(u.Seen[:0], u.Seen[drop:]...)
	}
	if u.HasSeen(idHash) {
		return false
	}
	u.Seen = append(u.Seen, Seen{Hash: idHash, Time: now})

	switch e.Kind {
	case event.Touch:
		t.touch(u, e, now, b)
	case event.Action:
		t.action(u, e, now, b)
	}
	return true
}

// expireJourney ends the open journey without conversion when its last touch
// is more than the journey timeout before now.
func (t *Tracker) expireJourney(u *UserState, now int64) {
	if n := len(u.Touches); n > 0 && now-u.Touches[n-1].Time > int64(t.p.JourneyTimeout) {
		u.Touches = u.Touches[:0]
	}
}

func (t *Tracker) touch(u *UserState, e *event.Event, now int64, b *tally.Batch) {
	b.Add(tally.Activity, now, "", tally.Vec{0, 0, 1})
	t.expireJourney(u, now)
	t.openJourneyAgg(b, u, -1)
	if len(u.Touches) >= t.p.MaxTouches {
		u.Touches = append(u.Touches[:0], u.Touches[len(u.Touches)-t.p.MaxTouches+1:]...)
	}
	u.Touches = append(u.Touches, Touch{
		Channel:  e.Channel,
		Campaign: e.Campaign,
		Time:     now,
		View:     e.Interaction == event.View,
	})
	t.openJourneyAgg(b, u, +1)
}

func (t *Tracker) action(u *UserState, e *event.Event, now int64, b *tally.Batch) {
	if u.LastAction == 0 || now-u.LastAction >= int64(t.p.SessionGap) {
		// The previous session, if any, ended: its contribution is final.
		u.Sessions++
		u.SessionStart = now
		u.Path = u.Path[:0]
		u.PathLen = 0
		b.Add(tally.Activity, now, "", tally.Vec{1, 1, 0})
	} else {
		b.Add(tally.Activity, now, "", tally.Vec{0, 1, 0})
		if t.p.PathStats && len(u.Path) > 0 && len(u.Path) < t.p.MaxPath {
			last := u.LastAction
			u.LastAction = now
			u.PathLen++
			t.sessionStep(b, u, e.Action, last, now)
			if t.conv[e.Action] {
				t.convert(u, e, now, b)
			}
			return
		}
		t.sessionAgg(b, u, -1)
	}
	u.LastAction = now
	u.PathLen++
	if len(u.Path) < t.p.MaxPath {
		u.Path = append(u.Path, e.Action)
	}
	t.sessionAgg(b, u, +1)
	if t.conv[e.Action] {
		t.convert(u, e, now, b)
	}
}

// Eligible appends to dst the touches of u's open journey that may be credited
// for a conversion at now: clicks at most ClickLookback and views at most
// ViewLookback before it.
func (t *Tracker) Eligible(dst []Touch, u *UserState, now int64) []Touch {
	for _, tc := range u.Touches {
		lb := t.p.ClickLookback
		if tc.View {
			lb = t.p.ViewLookback
		}
		if d := now - tc.Time; d >= 0 && d <= int64(lb) {
			dst = append(dst, tc)
		}
	}
	return dst
}

func (t *Tracker) convert(u *UserState, e *event.Event, now int64, b *tally.Batch) {
	b.Add(tally.Totals, now, "", tally.Vec{1, e.Value, 0})
	t.expireJourney(u, now)
	t.openJourneyAgg(b, u, -1)
	t.eligible = t.Eligible(t.eligible[:0], u, now)
	u.Touches = u.Touches[:0]
	if t.p.PathStats {
		t.chans = t.chans[:0]
		for _, tc := range t.eligible {
			t.chans = append(t.chans, tc.Channel)
		}
		t.journeyAgg(b, t.chans, true, e.Value, now, +1)
	}
	if len(t.eligible) == 0 {
		for _, name := range t.models {
			b.Add(tally.Credit, now, name+tally.Sep+t.p.Credit.Direct+tally.Sep, tally.Vec{NanoPerConversion, e.Value, 0})
		}
		return
	}
	t.touches = t.touches[:0]
	for _, tc := range t.eligible {
		t.touches = append(t.touches, credit.Touch{Channel: tc.Channel, Time: time.Unix(0, tc.Time)})
	}
	for _, m := range credit.RuleModels {
		t.weights = credit.Weights(m, t.p.Credit, t.touches, e.Time, t.weights[:0])
		t.nano = credit.Apportion(NanoPerConversion, t.weights, t.nano[:0])
		t.value = credit.Apportion(e.Value, t.weights, t.value[:0])
		name := t.models[m]
		for i, tc := range t.eligible {
			if t.nano[i] == 0 && t.value[i] == 0 {
				continue
			}
			b.Add(tally.Credit, now, name+tally.Sep+tc.Channel+tally.Sep+tc.Campaign, tally.Vec{t.nano[i], t.value[i], 0})
		}
	}
}
