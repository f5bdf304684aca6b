package query

import (
	"errors"
	"fmt"
	"sort"
	"time"

	"github.com/touchledger/touchledger/internal/credit"
	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/state"
	"github.com/touchledger/touchledger/internal/tally"
)

// ErrNoData is returned when the data directory holds no committed events.
var ErrNoData = errors.New("no data: nothing has been ingested into this data directory yet (run ingest first)")

// Querier answers queries from a consistent snapshot of a store.
type Querier struct {
	r       *state.Reader
	res     []state.Resolution
	maxSeen time.Time
}

// NewQuerier opens a snapshot of s. Close it when done.
func NewQuerier(s *state.Store) (*Querier, error) {
	r := s.NewReader()
	maxSeen, _, ok, err := r.Watermark()
	if err != nil {
		r.Discard()
		return nil, err
	}
	if !ok || maxSeen == -1<<63 {
		r.Discard()
		return nil, ErrNoData
	}
	return &Querier{r: r, res: s.Resolutions(), maxSeen: time.Unix(0, maxSeen).UTC()}, nil
}

// Close releases the snapshot.
func (q *Querier) Close() { q.r.Discard() }

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
func (q *Querier) Plan(s Span) (Plan, error) {
	from, to := s.From, s.To
	switch {
	case s.Last < 0:
		return Plan{}, fmt.Errorf("--last must be positive")
	case s.Last > 0 && (!from.IsZero() || !to.IsZero()):
		return Plan{}, fmt.Errorf("give either --last or --from/--to, not both")
	case s.Last > 0 || (from.IsZero() && to.IsZero()):
		last := s.Last
		if last == 0 {
			last = DefaultLast
		}
		to = q.maxSeen.Add(time.Nanosecond)
		from = to.Add(-last)
	case from.IsZero():
		return Plan{}, fmt.Errorf("--to needs --from")
	case to.IsZero():
		to = q.maxSeen.Add(time.Nanosecond)
	}
	return PlanWindow(q.res, from, to, q.maxSeen)
}

// Table sums family f over the plan.
func (q *Querier) Table(p Plan, f tally.Family) (tally.Table, error) { return Sum(q.r, p, f) }

// Credit answers `query credit` for a rule-based model.
func (q *Querier) Credit(model string, by string, s Span) (CreditAnswer, error) {
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

// ShiftAnswer is the answer of `query shift`: credit per channel per day.
type ShiftAnswer struct {
	Model    string     `json:"model"`
	Days     []ShiftDay `json:"days"`
	Channels []string   `json:"channels"`
}

// ShiftDay is one day of a shift answer.
type ShiftDay struct {
	Day         string      `json:"day"` // YYYY-MM-DD (UTC)
	Conversions int64       `json:"conversions"`
	Value       float64     `json:"value"`
	Channels    []ShiftCell `json:"channels"`
}

// ShiftCell is one channel on one day. Change and ShareChange are against the
// previous day shown (0 on the first day).
type ShiftCell struct {
	Channel     string  `json:"channel"`
	Conversions float64 `json:"conversions"`
	Value       float64 `json:"value"`
	Share       float64 `json:"share"`
	Change      float64 `json:"change"`       // conversions − previous day's
	ShareChange float64 `json:"share_change"` // share − previous day's share
}

// Shift answers `query shift`: the last `days` UTC days up to and including
// the day of the latest event.
func (q *Querier) Shift(model string, days int) (ShiftAnswer, error) {
	m, err := credit.ParseModel(model)
	if err != nil {
		return ShiftAnswer{}, err
	}
	if days < 1 || days > 3660 {
		return ShiftAnswer{}, fmt.Errorf("--days must be between 1 and 3660, got %d", days)
	}
	last := q.maxSeen.Truncate(24 * time.Hour)
	a := ShiftAnswer{Model: m.String()}
	seen := map[string]bool{}
	prev := map[string]ShiftCell{}
	for i := days - 1; i >= 0; i-- {
		day := last.AddDate(0, 0, -i)
		p, err := PlanWindow(q.res, day, day.Add(24*time.Hour), q.maxSeen)
		if err != nil {
			return ShiftAnswer{}, err
		}
		totals, err := q.Table(p, tally.Totals)
		if err != nil {
			return ShiftAnswer{}, err
		}
		ct, err := q.Table(p, tally.Credit)
		if err != nil {
			return ShiftAnswer{}, err
		}
		c := RuleCredit(m.String(), ByChannel, p, totals, ct)
		d := ShiftDay{Day: day.Format("2006-01-02"), Conversions: c.Conversions, Value: c.Value}
		for _, ch := range c.Channels {
			seen[ch.Channel] = true
		}
		a.Days = append(a.Days, d)
		cur := map[string]ShiftCell{}
		for _, ch := range c.Channels {
			cur[ch.Channel] = ShiftCell{Channel: ch.Channel, Conversions: ch.Conversions, Value: ch.Value, Share: ch.Share}
		}
		a.Days[len(a.Days)-1].Channels = nil
		for name := range seen {
			cell := cur[name]
			cell.Channel = name
			if i != days-1 {
				cell.Change = cell.Conversions - prev[name].Conversions
				cell.ShareChange = cell.Share - prev[name].Share
			}
			cur[name] = cell
		}
		prev = cur
		a.Days[len(a.Days)-1].Channels = cellsOf(cur)
	}
	for name := range seen {
		a.Channels = append(a.Channels, name)
	}
	sort.Strings(a.Channels)
	// Fill channels first seen on a later day into earlier days as zeros.
	for i := range a.Days {
		have := map[string]bool{}
		for _, c := range a.Days[i].Channels {
			have[c.Channel] = true
		}
		for _, name := range a.Channels {
			if !have[name] {
				a.Days[i].Channels = append(a.Days[i].Channels, ShiftCell{Channel: name})
			}
		}
		sort.Slice(a.Days[i].Channels, func(x, y int) bool { return a.Days[i].Channels[x].Channel < a.Days[i].Channels[y].Channel })
	}
	return a, nil
}

func cellsOf(m map[string]ShiftCell) []ShiftCell {
	out := make([]ShiftCell, 0, len(m))
	for _, c := range m {
		out = append(out, c)
	}
	return out
}

// Summary is what a data directory holds, for `query status`.
type Summary struct {
	Latest      string  `json:"latest_event"`
	Conversions int64   `json:"conversions"`
	Value       float64 `json:"value"`
	Sessions    int64   `json:"sessions"`
	Actions     int64   `json:"actions"`
	Touches     int64   `json:"touches"`
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
