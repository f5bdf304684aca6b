package query

import (
	"errors"
	"fmt"
	"slices"
	"sort"
	"time"

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

// Querier answers queries from a Source.
type Querier struct {
	src     Source
	res     []state.Resolution
	maxSeen time.Time
	p       Params
}

// NewQuerier answers from a snapshot of a local store. Close it when done.
func NewQuerier(s *state.Store, p Params) (*Querier, error) {
	return NewQuerierFrom(NewLocalSource(s), s.Resolutions(), p)
}

// NewQuerierFrom answers from src, whose buckets follow res. It takes
// ownership of src.
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
	return &Querier{src: src, res: res, maxSeen: latest, p: p}, nil
}

// Close releases the source.
func (q *Querier) Close() { q.src.Close() }

// Latest returns the latest event time seen: the end of --last windows.
func (q *Querier) Latest() time.Time { return q.maxSeen }

// Span is a requested window: either Last (ending at the latest event time
// seen) or [From, To).
type Span struct {
	From, To time.Time
	Last     time.Duration
}

// DefaultLast is the window used when none is given.
const DefaultLast = 30 * 24 * time.Hour

// Plan resolves a span to the buckets that answer it.
func (q *Querier) Plan(s Span) (Plan, error) { return q.PlanFor(tally.Totals, s) }

// PlanFor resolves a span for family f, using only the resolutions f is kept
// at (path statistics start at hours).
func (q *Querier) PlanFor(f tally.Family, s Span) (Plan, error) {
	from, to, err := q.resolve(s)
	if err != nil {
		return Plan{}, err
	}
	idx := state.FamilyResolutions(q.res, f)
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
	return p, nil
}

func (q *Querier) resolve(s Span) (time.Time, time.Time, error) {
	from, to := s.From, s.To
	switch {
	case s.Last < 0:
		return from, to, fmt.Errorf("--last must be positive")
	case s.Last > 0 && (!from.IsZero() || !to.IsZero()):
		return from, to, fmt.Errorf("give either --last or --from/--to, not both")
	case s.Last > 0 || (from.IsZero() && to.IsZero()):
		last := s.Last
		if last == 0 {
			last = DefaultLast
		}
		to = q.maxSeen.Add(time.Nanosecond)
		from = to.Add(-last)
	case from.IsZero():
		return from, to, fmt.Errorf("--to needs --from")
	case to.IsZero():
		to = q.maxSeen.Add(time.Nanosecond)
	}
	return from, to, nil
}

// Table sums family f over the plan.
func (q *Querier) Table(p Plan, f tally.Family) (tally.Table, error) { return q.src.Sum(p, f) }

// Credit answers `query credit`. order applies to the Markov model (0 = 1).
func (q *Querier) Credit(model string, by string, order int, s Span) (CreditAnswer, error) {
	if IsDataDriven(model) {
		return q.dataCredit(model, by, order, s)
	}
	m, err := credit.ParseModel(model)
	if err != nil {
		return CreditAnswer{}, err
	}
	p, err := q.Plan(s)
	if err != nil {
		return CreditAnswer{}, err
	}
	totals, err := q.Table(p, tally.Totals)
	if err != nil {
		return CreditAnswer{}, err
	}
	ct, err := q.Table(p, tally.Credit)
	if err != nil {
		return CreditAnswer{}, err
	}
	return RuleCredit(m.String(), by, p, totals, ct), nil
}

func (q *Querier) dataCredit(model, by string, order int, s Span) (CreditAnswer, error) {
	if by != ByChannel {
		return CreditAnswer{}, fmt.Errorf("the %s model credits channels only (no --by campaign)", model)
	}
	if order == 0 {
		order = 1
	}
	if order < 1 || order > q.p.MarkovMaxOrder {
		return CreditAnswer{}, fmt.Errorf("--order must be 1 to %d (markov_max_order), got %d", q.p.MarkovMaxOrder, order)
	}
	p, err := q.PlanFor(tally.JourneyPaths, s)
	if err != nil {
		return CreditAnswer{}, err
	}
	totals, err := q.Table(p, tally.Totals)
	if err != nil {
		return CreditAnswer{}, err
	}
	paths, err := q.Table(p, tally.JourneyPaths)
	if err != nil {
		return CreditAnswer{}, err
	}
	return DataDrivenCredit(model, order, p, q.p, totals, paths)
}

// Transitions answers `query transitions`; level is "channel" or "action".
func (q *Querier) Transitions(level string, order int, s Span) (TransitionsAnswer, error) {
	f := tally.SessionPaths
	switch level {
	case "action":
	case "channel":
		f = tally.JourneyPaths
		if order == 0 {
			order = 1
		}
		if order < 1 || order > q.p.MarkovMaxOrder {
			return TransitionsAnswer{}, fmt.Errorf("--order must be 1 to %d, got %d", q.p.MarkovMaxOrder, order)
		}
	default:
		return TransitionsAnswer{}, fmt.Errorf("unknown level %q: use channel or action", level)
	}
	p, err := q.PlanFor(f, s)
	if err != nil {
		return TransitionsAnswer{}, err
	}
	t, err := q.Table(p, f)
	if err != nil {
		return TransitionsAnswer{}, err
	}
	return Transitions(level, order, q.p.CollapseRepeats, p, t), nil
}

// Paths answers `query paths`.
func (q *Querier) Paths(level string, top int, s Span) (PathsAnswer, error) {
	f := tally.SessionPaths
	switch level {
	case "action":
	case "channel":
		f = tally.JourneyPaths
	default:
		return PathsAnswer{}, fmt.Errorf("unknown level %q: use channel or action", level)
	}
	if top < 1 {
		return PathsAnswer{}, fmt.Errorf("--top must be at least 1")
	}
	p, err := q.PlanFor(f, s)
	if err != nil {
		return PathsAnswer{}, err
	}
	t, err := q.Table(p, f)
	if err != nil {
		return PathsAnswer{}, err
	}
	return Paths(level, top, q.p.PathMaxLen, p, t), nil
}

// Funnel answers `query funnel`.
func (q *Querier) Funnel(s Span) (FunnelAnswer, error) {
	p, err := q.Plan(s)
	if err != nil {
		return FunnelAnswer{}, err
	}
	t, err := q.Table(p, tally.Funnel)
	if err != nil {
		return FunnelAnswer{}, err
	}
	return Funnel(q.p.FunnelSteps, p, t), nil
}

// Alerts answers `query alerts`: the step-abandonment chart is run from the
// baseline's length before the window (so the baseline is warm) and the
// alerts that were open at any time in the window are listed. The series
// comes from the finest resolution whose step divides the interval, so it
// reaches back at most that resolution's retention.
func (q *Querier) Alerts(s Span, withPoints bool) (AlertsAnswer, error) {
	p, err := q.Plan(s)
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
	step := int64(iv / time.Second)
	from := tally.FloorDiv(p.From.Unix(), step) * step
	to := (tally.FloorDiv(p.To.Unix()-1, step) + 1) * step
	warm := from - int64(q.p.Alert.Baseline)*step
	if r := q.res[res].Retention; r > 0 {
		if keep := q.maxSeen.Unix() - int64(r/time.Second); warm < keep {
			warm = (tally.FloorDiv(keep, step) + 1) * step
		}
	}
	if warm > from {
		from = warm
	}
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
	si := slices.Index(q.p.FunnelSteps, q.p.AlertStep)
	if si < 0 || si == len(q.p.FunnelSteps)-1 {
		return AlertsAnswer{}, fmt.Errorf("alert step %q is not a funnel step before the last", q.p.AlertStep)
	}
	series := StepIntervals(time.Unix(warm, 0), time.Unix(to, 0), iv, si, len(q.p.FunnelSteps), buckets)
	name := q.p.AlertStep + "_abandonment"
	all, err := Alerts(name, Plan{From: time.Unix(warm, 0).UTC(), To: time.Unix(to, 0).UTC()}, iv, series, q.p.Alert, withPoints)
	if err != nil {
		return AlertsAnswer{}, err
	}
	a := AlertsAnswer{Name: name, From: FormatTime(time.Unix(from, 0)), To: FormatTime(time.Unix(to, 0)), Interval: all.Interval, Alerts: []AlertRecord{}}
	for _, al := range all.Alerts {
		opened, _ := time.Parse(time.RFC3339, al.Opened)
		closed, _ := time.Parse(time.RFC3339, al.Closed)
		if opened.Unix() < to && (al.Open || closed.Unix() > from) {
			a.Alerts = append(a.Alerts, al)
		}
	}
	for _, pt := range all.Points {
		st, _ := time.Parse(time.RFC3339, pt.Start)
		if st.Unix() >= from {
			a.Points = append(a.Points, pt)
		}
	}
	return a, nil
}

// ShiftAnswer is the answer of `query shift`: credit per channel per day.
type ShiftAnswer struct {
	Model             string     `json:"model"`           // the model's id
	Order             int        `json:"order,omitempty"` // markov only
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

// Shift answers `query shift`: the last `days` UTC days up to and including
// the day of the latest event, each day credited on its own.
func (q *Querier) Shift(model string, order int, days int) (ShiftAnswer, error) {
	if !IsDataDriven(model) {
		if _, err := credit.ParseModel(model); err != nil {
			return ShiftAnswer{}, err
		}
	}
	if days < 1 || days > 3660 {
		return ShiftAnswer{}, fmt.Errorf("--days must be between 1 and 3660, got %d", days)
	}
	last := q.maxSeen.Truncate(24 * time.Hour)
	a := ShiftAnswer{Model: model}
	seen := map[string]bool{}
	var perDay []map[string]ShiftCell
	for i := days - 1; i >= 0; i-- {
		day := last.AddDate(0, 0, -i)
		c, err := q.Credit(model, ByChannel, order, Span{From: day, To: day.Add(24 * time.Hour)})
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

// Summary is what a data directory holds, for `query status`.
type Summary struct {
	Latest            string  `json:"latest_event"`
	Conversions       int64   `json:"conversions"`
	Value             float64 `json:"value"`
	Sessions          int64   `json:"sessions"`
	Actions           int64   `json:"actions"`
	Touches           int64   `json:"touches"`
	MissingPartitions []int   `json:"missing_partitions,omitempty"` // partitions that did not answer
}

// Status sums the activity over a span.
func (q *Querier) Status(s Span) (Summary, Plan, error) {
	p, err := q.Plan(s)
	if err != nil {
		return Summary{}, Plan{}, err
	}
	tot, err := q.Table(p, tally.Totals)
	if err != nil {
		return Summary{}, p, err
	}
	act, err := q.Table(p, tally.Activity)
	if err != nil {
		return Summary{}, p, err
	}
	v := act[""]
	return Summary{
		Latest:      q.maxSeen.Format(time.RFC3339Nano),
		Conversions: tot[""][0],
		Value:       float64(tot[""][1]) / event.ValueScale,
		Sessions:    v[0], Actions: v[1], Touches: v[2],
	}, p, nil
}
