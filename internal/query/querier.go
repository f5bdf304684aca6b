package query

import (
	"errors"
	"fmt"
	"slices"
	"sort"
	"time"

	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/credit"
	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/state"
	"github.com/touchledger/touchledger/internal/tally"
)

// ErrNoData is returned when the data directory holds no committed events.
var ErrNoData = errors.New("no data: nothing has been ingested into this data directory yet (run ingest first)")

// Source is where a Querier reads counters: a snapshot of a local store, or
// the merged answers of several workers. Every table is a plain sum, so
// merging sources is addition.
type Source interface {
	// Latest returns the largest event time seen; ok is false when nothing
	// was ingested.
	Latest() (t time.Time, ok bool, err error)
	// Sum adds family f over the plan's buckets into a new table.
	Sum(p Plan, f tally.Family) (tally.Table, error)
	// Buckets returns family f per bucket of resolution res (index into the
	// store's resolutions) for bucket starts in [from, to), Unix seconds.
	Buckets(res int, f tally.Family, from, to int64) (map[int64]tally.Table, error)
	// Close releases the source.
	Close()
}

// LocalSource reads a consistent snapshot of a local store.
type LocalSource struct{ r *state.Reader }

// NewLocalSource opens a snapshot of s.
func NewLocalSource(s *state.Store) *LocalSource { return &LocalSource{r: s.NewReader()} }

// Latest implements Source.
func (l *LocalSource) Latest() (time.Time, bool, error) {
	maxSeen, _, ok, err := l.r.Watermark()
	if err != nil || !ok || maxSeen == -1<<63 {
		return time.Time{}, false, err
	}
	return time.Unix(0, maxSeen).UTC(), true, nil
}

// Sum implements Source.
func (l *LocalSource) Sum(p Plan, f tally.Family) (tally.Table, error) { return Sum(l.r, p, f) }

// Buckets implements Source.
func (l *LocalSource) Buckets(res int, f tally.Family, from, to int64) (map[int64]tally.Table, error) {
	out := map[int64]tally.Table{}
	err := l.r.Buckets(res, f, from, to, func(b int64, t tally.Table) error {
		out[b] = t
		return nil
	})
	return out, err
}

// Close implements Source.
func (l *LocalSource) Close() { l.r.Discard() }

// Querier answers queries from a Source. Answer is its one entry point:
// every surface builds a Request and asks it; the typed methods below are
// the computations Answer dispatches to.
type Querier struct {
	src     Source
	res     []state.Resolution
	common  []int // indexes of the resolutions every family is kept at
	maxSeen time.Time
	p       Params
	missing []int
}

// NewQuerier answers from a snapshot of a local store. Close it when done.
func NewQuerier(s *state.Store, p Params) (*Querier, error) {
	return NewQuerierFrom(NewLocalSource(s), s.Resolutions(), p)
}

// NewQuerierFrom answers from src, whose buckets follow res. It takes
// ownership of src. When src reports partitions that did not answer
// (a Missing() []int method), every answer lists them.
func NewQuerierFrom(src Source, res []state.Resolution, p Params) (*Querier, error) {
	latest, ok, err := src.Latest()
	if err != nil {
		src.Close()
		return nil, err
	}
	if !ok {
		src.Close()
		return nil, ErrNoData
	}
	q := &Querier{src: src, res: res, maxSeen: latest, p: p}
	var step int64
	for _, f := range tally.Families {
		step = max(step, tally.MinStep(f))
	}
	for i, r := range res {
		if int64(r.Step/time.Second) >= step {
			q.common = append(q.common, i)
		}
	}
	if m, ok := src.(interface{ Missing() []int }); ok {
		q.missing = m.Missing()
	}
	return q, nil
}

// Close releases the source.
func (q *Querier) Close() { q.src.Close() }

// Latest returns the latest event time seen: the end of "last" windows.
func (q *Querier) Latest() time.Time { return q.maxSeen }

// Params returns the query-time settings the answers use.
func (q *Querier) Params() Params { return q.p }

// Missing lists the partitions that did not answer (nil: complete).
func (q *Querier) Missing() []int { return q.missing }

// Span is a requested window: either Last (ending at the latest event time
// seen) or [From, To). The zero time means "not given".
type Span struct {
	From, To time.Time
	Last     time.Duration
}

// DefaultLast is the window used when none is given.
const DefaultLast = 30 * 24 * time.Hour

// Plan resolves a span to the buckets that answer it over every family:
// it uses only the resolutions all families are kept at (path statistics
// start at hours).
func (q *Querier) Plan(s Span) (Plan, error) { return q.planOver(q.common, s) }

// PlanFor resolves a span for family f alone, using every resolution f is
// kept at. It serves single-family gauges; answers use plan.
func (q *Querier) PlanFor(f tally.Family, s Span) (Plan, error) {
	return q.planOver(state.FamilyResolutions(q.res, f), s)
}

// plan is the one window plan of a request reading families fams: when the
// window's edges fall on buckets every one of those families holds, it is
// covered exactly; otherwise it is rounded out to the buckets every family
// of every answer holds (Plan), so a window that needs rounding gives the
// same from/to in credit (every model), funnel, paths, transitions and
// alerts.
func (q *Querier) plan(s Span, fams ...tally.Family) (Plan, error) {
	own := q.common
	if len(fams) > 0 {
		own = nil
		for i, r := range q.res {
			keep := true
			for _, f := range fams {
				keep = keep && int64(r.Step/time.Second) >= tally.MinStep(f)
			}
			if keep {
				own = append(own, i)
			}
		}
	}
	p, err := q.planOver(own, s)
	if err != nil || !p.Rounded || slices.Equal(own, q.common) {
		return p, err
	}
	return q.Plan(s)
}

func (q *Querier) planOver(idx []int, s Span) (Plan, error) {
	from, to, err := q.resolve(s)
	if err != nil {
		return Plan{}, err
	}
	sub := make([]state.Resolution, len(idx))
	for i, j := range idx {
		sub[i] = q.res[j]
	}
	p, err := PlanWindow(sub, from, to, q.maxSeen)
	if err != nil {
		return Plan{}, err
	}
	for i := range p.Pieces {
		p.Pieces[i].Res = idx[p.Pieces[i].Res]
	}
	if p.Rounded && idx[0] > 0 {
		p.Rounding += fmt.Sprintf("; %s buckets are the finest every answer holds (path statistics), so every answer covers the same span", q.res[idx[0]].Name)
	}
	return p, nil
}

func (q *Querier) resolve(s Span) (time.Time, time.Time, error) {
	if err := s.Validate(); err != nil {
		return time.Time{}, time.Time{}, err
	}
	from, to := s.From, s.To
	switch {
	case s.Last > 0 || (from.IsZero() && to.IsZero()):
		last := s.Last
		if last == 0 {
			last = DefaultLast
		}
		to = q.maxSeen.Add(time.Nanosecond)
		from = to.Add(-last)
	case to.IsZero():
		to = q.maxSeen.Add(time.Nanosecond)
		if !from.Before(to) {
			return from, to, &ParamError{Param: "from", Err: fmt.Errorf("%s is after the latest event (%s)", FormatTime(from), q.maxSeen.Format(time.RFC3339Nano))}
		}
	}
	return from, to, nil
}

// Table sums family f over the plan.
func (q *Querier) Table(p Plan, f tally.Family) (tally.Table, error) { return q.src.Sum(p, f) }

// Answer validates r and answers it: the one entry point of every surface.
// A *ParamError (IsParamError) is the asker's fault; ErrNoData is not
// returned here (NewQuerier reports it); other errors are the reader's.
func (q *Querier) Answer(r Request) (Answer, error) {
	if err := r.Validate(); err != nil {
		return Answer{}, err
	}
	if r.Order > q.p.MarkovMaxOrder {
		return Answer{}, paramErr("order", "must be 1 to %d (markov_max_order), got %d", q.p.MarkovMaxOrder, r.Order)
	}
	r = r.withDefaults()
	a := Answer{Kind: r.Kind}
	var err error
	switch r.Kind {
	case KindCredit:
		var c CreditAnswer
		if c, err = q.credit(r.Model, r.By, r.Order, r.Window); err == nil {
			c.MissingPartitions = q.missing
			a.Credit = &c
		}
	case KindShift:
		var c ShiftAnswer
		if c, err = q.shift(r.Model, r.Order, r.Days); err == nil {
			c.MissingPartitions = q.missing
			a.Shift = &c
		}
	case KindTransitions:
		var c TransitionsAnswer
		if c, err = q.transitions(r.Level, r.Order, r.Window); err == nil {
			c.MissingPartitions = q.missing
			a.Transitions = &c
		}
	case KindPaths:
		var c PathsAnswer
		if c, err = q.paths(r.Level, r.Top, r.Window); err == nil {
			c.MissingPartitions = q.missing
			a.Paths = &c
		}
	case KindFunnel:
		var c FunnelAnswer
		if c, err = q.funnel(r.Window); err == nil {
			c.MissingPartitions = q.missing
			a.Funnel = &c
		}
	case KindAlerts:
		var c AlertsAnswer
		if c, err = q.alerts(r.Window, r.Points); err == nil {
			c.MissingPartitions = q.missing
			a.Alerts = &c
		}
	case KindStatus:
		var c StatusAnswer
		if c, err = q.status(r.Window); err == nil {
			c.MissingPartitions = q.missing
			a.Status = &c
		}
	case KindScorecard:
		var c ScorecardAnswer
		if c, err = q.scorecard(r.Truth, r.Window); err == nil {
			c.MissingPartitions = q.missing
			a.Scorecard = &c
		}
	}
	return a, err
}

// Credit asks a credit question (Answer with KindCredit). order applies to
// the markov model only (0: 1).
func (q *Querier) Credit(model, by string, order int, s Span) (CreditAnswer, error) {
	if model != ModelMarkov {
		order = 0
	}
	a, err := q.Answer(Request{Kind: KindCredit, Model: model, By: by, Order: order, Window: s})
	if err != nil {
		return CreditAnswer{}, err
	}
	return *a.Credit, nil
}

// Shift asks a shift question (Answer with KindShift).
func (q *Querier) Shift(model string, order, days int) (ShiftAnswer, error) {
	if model != ModelMarkov {
		order = 0
	}
	a, err := q.Answer(Request{Kind: KindShift, Model: model, Order: order, Days: days})
	if err != nil {
		return ShiftAnswer{}, err
	}
	return *a.Shift, nil
}

// Transitions asks a transitions question (Answer with KindTransitions).
func (q *Querier) Transitions(level string, order int, s Span) (TransitionsAnswer, error) {
	if level != LevelChannel {
		order = 0
	}
	a, err := q.Answer(Request{Kind: KindTransitions, Level: level, Order: order, Window: s})
	if err != nil {
		return TransitionsAnswer{}, err
	}
	return *a.Transitions, nil
}

// Paths asks a paths question (Answer with KindPaths).
func (q *Querier) Paths(level string, top int, s Span) (PathsAnswer, error) {
	a, err := q.Answer(Request{Kind: KindPaths, Level: level, Top: top, Window: s})
	if err != nil {
		return PathsAnswer{}, err
	}
	return *a.Paths, nil
}

// Funnel asks a funnel question (Answer with KindFunnel).
func (q *Querier) Funnel(s Span) (FunnelAnswer, error) {
	a, err := q.Answer(Request{Kind: KindFunnel, Window: s})
	if err != nil {
		return FunnelAnswer{}, err
	}
	return *a.Funnel, nil
}

// Alerts asks an alerts question (Answer with KindAlerts).
func (q *Querier) Alerts(s Span, withPoints bool) (AlertsAnswer, error) {
	a, err := q.Answer(Request{Kind: KindAlerts, Points: withPoints, Window: s})
	if err != nil {
		return AlertsAnswer{}, err
	}
	return *a.Alerts, nil
}

// Status asks a status question (Answer with KindStatus).
func (q *Querier) Status(s Span) (StatusAnswer, error) {
	a, err := q.Answer(Request{Kind: KindStatus, Window: s})
	if err != nil {
		return StatusAnswer{}, err
	}
	return *a.Status, nil
}

func (q *Querier) credit(model string, by string, order int, s Span) (CreditAnswer, error) {
	fams := []tally.Family{tally.Totals, tally.Credit}
	if IsDataDriven(model) {
		fams = []tally.Family{tally.Totals, tally.JourneyPaths}
	}
	p, err := q.plan(s, fams...)
	if err != nil {
		return CreditAnswer{}, err
	}
	totals, err := q.Table(p, tally.Totals)
	if err != nil {
		return CreditAnswer{}, err
	}
	if IsDataDriven(model) {
		paths, err := q.Table(p, tally.JourneyPaths)
		if err != nil {
			return CreditAnswer{}, err
		}
		return DataDrivenCredit(model, order, p, q.p, totals, paths)
	}
	m, err := credit.ParseModel(model)
	if err != nil {
		return CreditAnswer{}, &ParamError{Param: "model", Err: err}
	}
	ct, err := q.Table(p, tally.Credit)
	if err != nil {
		return CreditAnswer{}, err
	}
	return RuleCredit(m.String(), by, p, totals, ct), nil
}

func (q *Querier) transitions(level string, order int, s Span) (TransitionsAnswer, error) {
	f := tally.SessionPaths
	if level == LevelChannel {
		f = tally.JourneyPaths
	} else {
		order = 0
	}
	p, err := q.plan(s, f)
	if err != nil {
		return TransitionsAnswer{}, err
	}
	t, err := q.Table(p, f)
	if err != nil {
		return TransitionsAnswer{}, err
	}
	return Transitions(level, order, q.p.CollapseRepeats, p, t), nil
}

func (q *Querier) paths(level string, top int, s Span) (PathsAnswer, error) {
	f := tally.SessionPaths
	if level == LevelChannel {
		f = tally.JourneyPaths
	}
	p, err := q.plan(s, f)
	if err != nil {
		return PathsAnswer{}, err
	}
	t, err := q.Table(p, f)
	if err != nil {
		return PathsAnswer{}, err
	}
	return Paths(level, top, q.p.PathMaxLen, p, t), nil
}

func (q *Querier) funnel(s Span) (FunnelAnswer, error) {
	p, err := q.plan(s, tally.Funnel)
	if err != nil {
		return FunnelAnswer{}, err
	}
	t, err := q.Table(p, tally.Funnel)
	if err != nil {
		return FunnelAnswer{}, err
	}
	return Funnel(q.p.FunnelSteps, p, t), nil
}

// alerts answers an alerts question: the step-abandonment chart is run from the
// baseline's length before the window (so the baseline is warm) and the
// alerts that were open at any time in the window are listed. The series
// comes from the finest resolution whose step divides the interval, so it
// reaches back at most that resolution's retention; the answer's coverage
// says so when that cuts the window.
func (q *Querier) alerts(s Span, withPoints bool) (AlertsAnswer, error) {
	p, err := q.plan(s, tally.Funnel)
	if err != nil {
		return AlertsAnswer{}, err
	}
	iv := q.p.AlertInterval
	res := -1
	for i, r := range q.res {
		if iv%r.Step == 0 {
			res = i
			break
		}
	}
	if res < 0 {
		return AlertsAnswer{}, fmt.Errorf("the alert interval %s is not a multiple of any bucket size", iv)
	}
	si := slices.Index(q.p.FunnelSteps, q.p.AlertStep)
	if si < 0 || si == len(q.p.FunnelSteps)-1 {
		return AlertsAnswer{}, fmt.Errorf("alert step %q is not a funnel step before the last", q.p.AlertStep)
	}
	step := int64(iv / time.Second)
	from := tally.FloorDiv(p.From.Unix(), step) * step
	to := (tally.FloorDiv(p.To.Unix()-1, step) + 1) * step
	cov := p.Coverage
	if from != p.From.Unix() || to != p.To.Unix() {
		cov.Rounded = true
		cov.Rounding = joinReason(cov.Rounding, fmt.Sprintf("edges moved to whole alert intervals (%s)", iv))
	}
	warm := from - int64(q.p.Alert.Baseline)*step
	if r := q.res[res].Retention; r > 0 {
		if keep := q.maxSeen.Unix() - int64(r/time.Second); warm < keep {
			warm = (tally.FloorDiv(keep, step) + 1) * step
		}
		if warm > from {
			from = warm
			cov.Rounded = true
			cov.Rounding = joinReason(cov.Rounding, fmt.Sprintf("start moved on: the chart reads %s buckets, kept %s (retention)", q.res[res].Name, config.Duration(r)))
		}
	}
	cov.From, cov.To = time.Unix(from, 0).UTC(), time.Unix(to, 0).UTC()
	raw, err := q.src.Buckets(res, tally.Funnel, warm, to)
	if err != nil {
		return AlertsAnswer{}, err
	}
	buckets := map[int64]tally.Table{}
	for b, t := range raw {
		k := tally.FloorDiv(b, step) * step
		if buckets[k] == nil {
			buckets[k] = tally.Table{}
		}
		buckets[k].AddTable(t)
	}
	series := StepIntervals(time.Unix(warm, 0), time.Unix(to, 0), iv, si, len(q.p.FunnelSteps), buckets)
	name := q.p.AlertStep + "_abandonment"
	all, err := Alerts(name, Plan{Coverage: Coverage{From: time.Unix(warm, 0).UTC(), To: time.Unix(to, 0).UTC()}}, iv, series, q.p.Alert, withPoints)
	if err != nil {
		return AlertsAnswer{}, err
	}
	a := AlertsAnswer{Name: name, Coverage: cov, Interval: all.Interval, Alerts: []AlertRecord{}}
	for _, al := range all.Alerts {
		if al.Opened.Unix() < to && (al.Open || al.Closed.Unix() > from) {
			a.Alerts = append(a.Alerts, al)
		}
	}
	for _, pt := range all.Points {
		if pt.Start.Unix() >= from {
			a.Points = append(a.Points, pt)
		}
	}
	return a, nil
}

func joinReason(a, b string) string {
	if a == "" {
		return b
	}
	return a + "; " + b
}

// ShiftAnswer is the answer of a shift question: credit per channel per day.
type ShiftAnswer struct {
	Model string `json:"model"`           // the model's id
	Order int    `json:"order,omitempty"` // markov only
	Coverage
	Days              []ShiftDay `json:"days"`
	Channels          []string   `json:"channels"`
	MissingPartitions []int      `json:"missing_partitions,omitempty"` // partitions that did not answer
}

// ShiftDay is one day of a shift answer.
type ShiftDay struct {
	Day         string      `json:"day"` // YYYY-MM-DD (UTC)
	Conversions int64       `json:"conversions"`
	Value       float64     `json:"value"`
	Channels    []ShiftCell `json:"channels"`
}

// ShiftCell is one channel on one day. Change and ShareChange are against the
// previous day shown; on the first day there is none to compare with, so they
// are nil (JSON null), not 0.
type ShiftCell struct {
	Channel     string   `json:"channel"`
	Conversions float64  `json:"conversions"`
	Value       float64  `json:"value"`
	Share       float64  `json:"share"`
	Change      *float64 `json:"change"`       // conversions − previous day's; nil on the first day
	ShareChange *float64 `json:"share_change"` // share − previous day's share; nil on the first day
}

// shift answers a shift question: the last `days` UTC days up to and
// including the day of the latest event, each day credited on its own.
func (q *Querier) shift(model string, order int, days int) (ShiftAnswer, error) {
	last := q.maxSeen.Truncate(24 * time.Hour)
	a := ShiftAnswer{Model: model}
	a.From = last.AddDate(0, 0, -(days - 1))
	a.To = last.Add(24 * time.Hour)
	seen := map[string]bool{}
	var perDay []map[string]ShiftCell
	for i := days - 1; i >= 0; i-- {
		day := last.AddDate(0, 0, -i)
		c, err := q.credit(model, ByChannel, order, Span{From: day, To: day.Add(24 * time.Hour)})
		if err != nil {
			return ShiftAnswer{}, err
		}
		a.Model, a.Order = c.Model, c.Order
		a.Days = append(a.Days, ShiftDay{Day: day.Format("2006-01-02"), Conversions: c.Conversions, Value: c.Value})
		cur := map[string]ShiftCell{}
		for _, ch := range c.Channels {
			seen[ch.Channel] = true
			cur[ch.Channel] = ShiftCell{Channel: ch.Channel, Conversions: ch.Conversions, Value: ch.Value, Share: ch.Share}
		}
		perDay = append(perDay, cur)
	}
	for name := range seen {
		a.Channels = append(a.Channels, name)
	}
	sort.Strings(a.Channels)
	for i := range a.Days {
		for _, name := range a.Channels {
			cell := perDay[i][name]
			cell.Channel = name
			if i > 0 {
				prev := perDay[i-1][name]
				change, shareChange := cell.Conversions-prev.Conversions, cell.Share-prev.Share
				cell.Change, cell.ShareChange = &change, &shareChange
			}
			a.Days[i].Channels = append(a.Days[i].Channels, cell)
		}
	}
	return a, nil
}

// StatusAnswer is what the data holds over a window.
type StatusAnswer struct {
	Coverage
	Latest            time.Time `json:"latest_event"` // the largest event time seen
	Conversions       int64     `json:"conversions"`
	Value             float64   `json:"value"`
	Sessions          int64     `json:"sessions"`
	Actions           int64     `json:"actions"`
	Touches           int64     `json:"touches"`
	MissingPartitions []int     `json:"missing_partitions,omitempty"` // partitions that did not answer
}

// status sums the activity over a span.
func (q *Querier) status(s Span) (StatusAnswer, error) {
	p, err := q.plan(s, tally.Totals, tally.Activity)
	if err != nil {
		return StatusAnswer{}, err
	}
	tot, err := q.Table(p, tally.Totals)
	if err != nil {
		return StatusAnswer{}, err
	}
	act, err := q.Table(p, tally.Activity)
	if err != nil {
		return StatusAnswer{}, err
	}
	v := act[""]
	return StatusAnswer{
		Coverage:    p.Coverage,
		Latest:      q.maxSeen,
		Conversions: tot[""][0],
		Value:       float64(tot[""][1]) / event.ValueScale,
		Sessions:    v[0], Actions: v[1], Touches: v[2],
	}, nil
}

// scorecard credits the window with every model and scores them against
// the truth file.
func (q *Querier) scorecard(truthPath string, s Span) (ScorecardAnswer, error) {
	truth, err := ReadTruth(truthPath)
	if err != nil {
		return ScorecardAnswer{}, &ParamError{Param: "truth", Err: err}
	}
	var answers []CreditAnswer
	for _, m := range Models() {
		a, err := q.credit(m, ByChannel, DefaultOrder, s)
		if err != nil {
			return ScorecardAnswer{}, fmt.Errorf("model %s: %w", m, err)
		}
		answers = append(answers, a)
	}
	return Scorecard(answers, truth), nil
}
