package query

import (
	"errors"
	"fmt"
	"slices"
	"sort"
	"strconv"
	"strings"
	"time"

	"github.com/touchledger/touchledger/internal/alert"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/credit"
	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/pathstats"
	"github.com/touchledger/touchledger/internal/tally"
)

// Params are the query-time settings of the data-driven models, paths,
// funnel and alerts (from the configuration file).
type Params struct {
	Direct          string        `json:"direct_channel"`
	MarkovMaxOrder  int           `json:"markov_max_order"`
	CollapseRepeats bool          `json:"collapse_repeats"` // Markov paths collapse consecutive repeats of a channel
	PathMaxLen      int           `json:"path_max_len"`     // path keys show at most this many steps
	ShapleyCap      int           `json:"shapley_cap"`
	FunnelSteps     []string      `json:"funnel_steps"`
	BasketStep      string        `json:"basket_step"`
	AlertInterval   time.Duration `json:"alert_interval_ns"`
	AlertStep       string        `json:"alert_step"` // funnel step whose abandonment is watched
	Alert           alert.Params  `json:"alert"`      // Baseline in intervals
}

// ParamsFrom builds the query-time settings from the file configuration.
func ParamsFrom(c config.Config) Params {
	step := c.Alert.Interval.D()
	return Params{
		Direct:          c.DirectChannel,
		MarkovMaxOrder:  c.MarkovMaxOrder,
		CollapseRepeats: c.CollapseRepeats,
		PathMaxLen:      c.PathMaxLen,
		ShapleyCap:      c.ShapleyCap,
		FunnelSteps:     c.FunnelSteps,
		BasketStep:      c.BasketStep,
		AlertInterval:   step,
		AlertStep:       c.Alert.Step,
		Alert: alert.Params{
			Lambda:      c.Alert.Lambda,
			L:           c.Alert.Limit,
			MinSessions: int64(c.Alert.MinSessions),
			Baseline:    max(1, int(c.Alert.Baseline.D()/step)),
			CloseAfter:  c.Alert.CloseAfter,
			Target:      c.Alert.Target,
		},
	}
}

// Data-driven model names.
const (
	ModelMarkov  = "markov"
	ModelShapley = "shapley"
)

// IsDataDriven reports whether model is computed from journey aggregates.
func IsDataDriven(model string) bool { return model == ModelMarkov || model == ModelShapley }

// journeySplit returns the journeys, conversions and value of journeys that
// have a channel path, and of conversions without an eligible touch
// (credited to the direct channel in full).
func journeySplit(paths tally.Table) (withPath tally.Vec, noPath tally.Vec) {
	for dims, v := range paths {
		if dims == "" {
			noPath = noPath.Add(v)
		} else {
			withPath = withPath.Add(v)
		}
	}
	return withPath, noPath
}

// Coalitions derives the channel-set counts of the Shapley model from
// journey paths: each path's distinct channels, sorted.
func Coalitions(paths tally.Table) []credit.Coalition {
	sets := map[string]tally.Vec{}
	for dims, v := range paths {
		if dims == "" || v.IsZero() {
			continue
		}
		chans := tally.Split(dims)
		sort.Strings(chans)
		chans = slices.Compact(chans)
		k := strings.Join(chans, tally.Sep)
		sets[k] = sets[k].Add(v)
	}
	out := make([]credit.Coalition, 0, len(sets))
	for k, v := range sets {
		out = append(out, credit.Coalition{Channels: tally.Split(k), Journeys: v[0], Conversions: v[1], Value: v[2]})
	}
	sort.Slice(out, func(i, j int) bool { return strings.Join(out[i].Channels, ",") < strings.Join(out[j].Channels, ",") })
	return out
}

// MarkovCounts derives the order-k transition counts from journey paths:
// each path of n journeys with c conversions contributes n × its states'
// transitions, c × (last state → @converted) and (n − c) × (last state →
// @lost). Paths (the empty one excepted) are @entry-prefixed as in
// credit.PathTransitions.
func MarkovCounts(paths tally.Table, k int, collapse bool) []credit.TransitionCount {
	counts := map[credit.Transition]int64{}
	var buf []credit.Transition
	for dims, v := range paths {
		if dims == "" || v[0] == 0 {
			continue
		}
		chans := tally.Split(dims)
		buf = credit.PathTransitions(buf[:0], chans, k, true, collapse)
		last := buf[len(buf)-1].From
		for _, tr := range buf[:len(buf)-1] {
			counts[tr] += v[0]
		}
		if v[1] != 0 {
			counts[credit.Transition{From: last, To: credit.StateConverted}] += v[1]
		}
		if n := v[0] - v[1]; n != 0 {
			counts[credit.Transition{From: last, To: credit.StateLost}] += n
		}
	}
	out := make([]credit.TransitionCount, 0, len(counts))
	for tr, n := range counts {
		if n != 0 {
			out = append(out, credit.TransitionCount{From: tr.From, To: tr.To, Count: n})
		}
	}
	sort.Slice(out, func(i, j int) bool {
		if out[i].From != out[j].From {
			return out[i].From < out[j].From
		}
		return out[i].To < out[j].To
	})
	return out
}

// DataDrivenCredit builds the credit answer of the Markov or Shapley model
// from a window's Totals and JourneyPaths tables.
//
// credit(c) = share(c) × conversions with a path (and × their value); the
// direct channel also gets every conversion that had no eligible touch.
// Markov shares are removal effects normalised over channels (Anderl et al.
// 2016); Shapley shares are Shapley values (Shapley 1953) of the
// conversion-rate value function normalised over channels, and may be
// negative.
func DataDrivenCredit(model string, order int, plan Plan, p Params, totals, paths tally.Table) (CreditAnswer, error) {
	a := CreditAnswer{Model: model, Coverage: plan.Coverage, By: ByChannel}
	tot := totals[""]
	a.Conversions = tot[0]
	a.Value = float64(tot[1]) / event.ValueScale
	withPath, noPath := journeySplit(paths)
	var channels []string
	var shares []float64
	var journeys []int64
	switch model {
	case ModelMarkov:
		a.Order = order
		counts := MarkovCounts(paths, order, p.CollapseRepeats)
		if len(counts) > 0 {
			r, err := credit.Markov(counts)
			switch {
			case errors.Is(err, credit.ErrNoConversionPath):
				a.Notes = append(a.Notes, "no journey with a touch converted in this window: the Markov model has nothing to share")
			case errors.Is(err, credit.ErrNoRemovalEffect):
				a.Notes = append(a.Notes, "no channel has a removal effect in this window")
			case err != nil:
				return CreditAnswer{}, err
			default:
				channels, shares = r.Channels, r.Share
				a.Notes = append(a.Notes, fmt.Sprintf("conversion probability from @entry %.4f", r.PConversion))
			}
		}
	case ModelShapley:
		cs := Coalitions(paths)
		if len(cs) > 0 {
			r, err := credit.Shapley(cs, p.ShapleyCap, "other")
			switch {
			case errors.Is(err, credit.ErrNoConversions):
				a.Notes = append(a.Notes, "no journey with a touch converted in this window: the Shapley model has nothing to share")
			case err != nil:
				return CreditAnswer{}, err
			default:
				channels, shares, journeys = r.Channels, r.Share, r.Journeys
				for _, s := range shares {
					if s < 0 {
						a.Notes = append(a.Notes, "negative shares: those channels' journeys convert less often than journeys without them")
						break
					}
				}
			}
		}
	default:
		return CreditAnswer{}, fmt.Errorf("unknown data-driven model %q", model)
	}
	rows := map[string]*ChannelCredit{}
	for i, ch := range channels {
		c := &ChannelCredit{
			Channel:     ch,
			Conversions: shares[i] * float64(withPath[1]),
			Value:       shares[i] * float64(withPath[2]) / event.ValueScale,
		}
		if journeys != nil {
			j := journeys[i]
			c.Journeys = &j
		}
		rows[ch] = c
	}
	if noPath[1] != 0 {
		c := rows[p.Direct]
		if c == nil {
			c = &ChannelCredit{Channel: p.Direct}
			if journeys != nil {
				var zero int64
				c.Journeys = &zero
			}
			rows[p.Direct] = c
		}
		c.Conversions += float64(noPath[1])
		c.Value += float64(noPath[2]) / event.ValueScale
	}
	// Sum in a fixed order so repeated answers are identical to the bit.
	names := make([]string, 0, len(rows))
	for name := range rows {
		names = append(names, name)
	}
	sort.Strings(names)
	var sum float64
	for _, name := range names {
		sum += rows[name].Conversions
	}
	for _, name := range names {
		c := rows[name]
		if sum != 0 {
			c.Share = c.Conversions / sum
		}
		a.Channels = append(a.Channels, *c)
	}
	SortChannels(a.Channels)
	if a.Channels == nil {
		a.Channels = []ChannelCredit{}
	}
	return a, nil
}

// TransitionsAnswer is the answer of `query transitions`.
type TransitionsAnswer struct {
	Level string `json:"level"`
	Order int    `json:"order,omitempty"`
	Coverage
	Transitions       []Transition `json:"transitions"`
	MissingPartitions []int        `json:"missing_partitions,omitempty"` // partitions that did not answer
}

// Transition is one row: a count and its share of the From row.
type Transition struct {
	From        string  `json:"from"`
	To          string  `json:"to"`
	Count       int64   `json:"count"`
	Probability float64 `json:"probability"`
}

// stateLabel names a Markov state for people.
func stateLabel(s string) string {
	switch s {
	case credit.StateEntry:
		return event.StateEntry
	case credit.StateConverted:
		return event.StateConverted
	case credit.StateLost:
		return event.StateLost
	}
	return strings.Join(credit.StateChannels(s), pathstats.PathSeparator)
}

// ActionCounts derives within-session action transitions from session
// paths: @entry → a1 → … → an → @exit, every consecutive pair, repeats kept.
func ActionCounts(paths tally.Table) map[[2]string]int64 {
	counts := map[[2]string]int64{}
	for dims, v := range paths {
		if dims == "" || v[0] == 0 {
			continue
		}
		prev := event.StateEntry
		for _, a := range tally.Split(dims) {
			counts[[2]string{prev, a}] += v[0]
			prev = a
		}
		counts[[2]string{prev, event.StateExit}] += v[0]
	}
	return counts
}

// Transitions builds a transition matrix from journey paths (level channel,
// Markov order k, as the Markov model sees them) or session paths (level
// action), with row probabilities p(a,b) = c(a,b) / Σ_b' c(a,b').
func Transitions(level string, order int, collapse bool, plan Plan, paths tally.Table) TransitionsAnswer {
	a := TransitionsAnswer{Level: level, Coverage: plan.Coverage}
	var rows []Transition
	if level == "channel" {
		a.Order = order
		for _, c := range MarkovCounts(paths, order, collapse) {
			rows = append(rows, Transition{From: stateLabel(c.From), To: stateLabel(c.To), Count: c.Count})
		}
	} else {
		for k, n := range ActionCounts(paths) {
			if n != 0 {
				rows = append(rows, Transition{From: k[0], To: k[1], Count: n})
			}
		}
	}
	out := map[string]int64{}
	for _, r := range rows {
		out[r.From] += r.Count
	}
	for i := range rows {
		rows[i].Probability = float64(rows[i].Count) / float64(out[rows[i].From])
	}
	rank := func(s string) int {
		switch s {
		case event.StateEntry:
			return 0
		case event.StateConverted, event.StateExit:
			return 2
		case event.StateLost:
			return 3
		}
		return 1
	}
	sort.Slice(rows, func(i, j int) bool {
		x, y := rows[i], rows[j]
		if rank(x.From) != rank(y.From) {
			return rank(x.From) < rank(y.From)
		}
		if x.From != y.From {
			return x.From < y.From
		}
		if x.Count != y.Count {
			return x.Count > y.Count
		}
		return x.To < y.To
	})
	a.Transitions = rows
	if a.Transitions == nil {
		a.Transitions = []Transition{}
	}
	return a
}

// PathsAnswer is the answer of `query paths`.
type PathsAnswer struct {
	Level string `json:"level"`
	Coverage
	Total             int64      `json:"total"` // sessions or journeys in the window
	Paths             []PathStat `json:"paths"`
	MissingPartitions []int      `json:"missing_partitions,omitempty"` // partitions that did not answer
}

// PathStat is one row of a paths answer: a path (with, for journeys, the
// state it ended in), how often it occurred, and the conversion rate of the
// path without its end.
//
// For sessions (level action) a row is a whole session path: Count sessions,
// Conversions of them reached a goal action, PathCount = Count, End empty.
// For journeys (level channel) a row is a channel path and its end state
// (@converted or @lost): Count journeys took that path and ended so, while
// PathCount journeys took the path whatever their end and Conversions of them
// converted. So
//
//	ConversionRate = Conversions / PathCount
//
// is the same on the @converted and the @lost row of one path: the share of
// journeys sharing the path that converted (a rate over rows that include
// their end would be 1 or 0 by construction).
type PathStat struct {
	Path           []string `json:"path"`          // steps, repeats collapsed; a cut path holds "…"
	End            string   `json:"end,omitempty"` // journeys: @converted or @lost; sessions: empty
	Count          int64    `json:"count"`         // sessions, or journeys with this path and end
	Share          float64  `json:"share"`         // Count / the answer's Total
	PathCount      int64    `json:"path_count"`    // sessions or journeys with this path, whatever the end
	Conversions    int64    `json:"conversions"`   // converted among PathCount
	ConversionRate float64  `json:"conversion_rate"`
}

// Key is the path joined with " → ", then the end state if any: the form
// tables and CSV show.
func (p PathStat) Key() string {
	k := strings.Join(p.Path, pathstats.PathSeparator)
	if p.End != "" {
		k += pathstats.PathSeparator + p.End
	}
	return k
}

// Paths lists the top most frequent paths (exact counts). Action paths are
// whole sessions with repeats collapsed; channel paths are journeys, one row
// per path and end state (see PathStat for the conversion rate). Paths
// longer than maxLen are shown cut with an ellipsis.
func Paths(level string, top, maxLen int, plan Plan, t tally.Table) PathsAnswer {
	a := PathsAnswer{Level: level, Coverage: plan.Coverage}
	type agg struct {
		steps   []string
		n, conv int64
	}
	keys := map[string]*agg{}
	for dims, v := range t {
		if v[0] == 0 || dims == "" {
			continue
		}
		steps := pathstats.PathSteps(tally.Split(dims), maxLen)
		key := strings.Join(steps, pathstats.PathSeparator)
		g := keys[key]
		if g == nil {
			g = &agg{steps: steps}
			keys[key] = g
		}
		g.n += v[0]
		g.conv += v[1]
		a.Total += v[0]
	}
	var rows []PathStat
	for _, g := range keys {
		if g.n == 0 {
			continue
		}
		base := PathStat{Path: g.steps, PathCount: g.n, Conversions: g.conv}
		if level != "channel" {
			base.Count = g.n
			rows = append(rows, base)
			continue
		}
		if g.conv != 0 {
			r := base
			r.End, r.Count = event.StateConverted, g.conv
			rows = append(rows, r)
		}
		if lost := g.n - g.conv; lost != 0 {
			r := base
			r.End, r.Count = event.StateLost, lost
			rows = append(rows, r)
		}
	}
	sort.Slice(rows, func(i, j int) bool {
		if rows[i].Count != rows[j].Count {
			return rows[i].Count > rows[j].Count
		}
		return rows[i].Key() < rows[j].Key()
	})
	if top > 0 && len(rows) > top {
		rows = rows[:top]
	}
	for i := range rows {
		rows[i].Share = float64(rows[i].Count) / float64(a.Total)
		rows[i].ConversionRate = float64(rows[i].Conversions) / float64(rows[i].PathCount)
	}
	a.Paths = rows
	if a.Paths == nil {
		a.Paths = []PathStat{}
	}
	return a
}

// FunnelAnswer is the answer of `query funnel`.
type FunnelAnswer struct {
	Coverage
	Sessions          int64        `json:"sessions"`
	Steps             []FunnelStep `json:"steps"`
	BasketSessions    int64        `json:"basket_sessions"`
	BasketAbandonment *float64     `json:"basket_abandonment"`           // nil (null) without basket sessions
	OverallConversion *float64     `json:"overall_conversion"`           // last step / first step; nil when no session reached the first
	MissingPartitions []int        `json:"missing_partitions,omitempty"` // partitions that did not answer
}

// FunnelStep is one step of an in-order funnel: sessions that reached it in
// order, and the share of those that did not reach the next step. The last
// step has no next step and a step no session reached has no share, so
// their Abandonment is nil (JSON null): unknown, not 0.
type FunnelStep struct {
	Step        string   `json:"step"`
	Sessions    int64    `json:"sessions"`
	Abandonment *float64 `json:"abandonment"` // 1 − next/this; nil for the last step and when Sessions is 0
}

// ratio returns &x, for optional numbers.
func ratio(x float64) *float64 { return &x }

// Funnel builds the in-order funnel over sessions whose last event lies in the
// window: reached(i) = sessions with depth > i; abandonment(i) = 1 −
// reached(i+1)/reached(i) (common practice); basket abandonment = basket
// sessions without a conversion / basket sessions.
func Funnel(steps []string, plan Plan, t tally.Table) FunnelAnswer {
	a := FunnelAnswer{Coverage: plan.Coverage}
	reached := make([]int64, len(steps))
	var basket, basketConv int64
	for dims, v := range t {
		d, err := strconv.Atoi(dims)
		if err != nil || d < 0 {
			continue
		}
		a.Sessions += v[0]
		pathstats.AddDepth(reached, d, v[0])
		basket += v[1]
		basketConv += v[2]
	}
	abandon := pathstats.StepAbandonment(reached)
	for i, s := range steps {
		st := FunnelStep{Step: s, Sessions: reached[i]}
		if i < len(abandon) && reached[i] > 0 {
			st.Abandonment = ratio(abandon[i])
		}
		a.Steps = append(a.Steps, st)
	}
	a.BasketSessions = basket
	if basket > 0 {
		a.BasketAbandonment = ratio(pathstats.Abandonment(basket, basketConv))
	}
	if len(steps) > 0 && reached[0] > 0 {
		a.OverallConversion = ratio(float64(reached[len(steps)-1]) / float64(reached[0]))
	}
	return a
}

// AlertsAnswer is the answer of `query alerts`.
type AlertsAnswer struct {
	Name string `json:"name"` // what is watched, e.g. checkout_abandonment
	Coverage
	Interval          string        `json:"interval"`
	Alerts            []AlertRecord `json:"alerts"`
	Points            []AlertPoint  `json:"points,omitempty"`
	MissingPartitions []int         `json:"missing_partitions,omitempty"` // partitions that did not answer
}

// AlertRecord is one abandonment alert.
type AlertRecord struct {
	Name     string    `json:"name"`
	Opened   time.Time `json:"opened"`
	Closed   time.Time `json:"closed,omitzero"` // zero while open
	Open     bool      `json:"open"`
	Rate     float64   `json:"rate"`
	Baseline float64   `json:"baseline"`
	Limit    float64   `json:"limit"`
	Peak     float64   `json:"peak"`
}

// AlertPoint is one interval of the chart.
type AlertPoint struct {
	Start     time.Time `json:"start"`
	Sessions  int64     `json:"sessions"`
	Abandons  int64     `json:"abandons"`
	Rate      float64   `json:"rate"`
	Statistic float64   `json:"statistic"`
	Baseline  float64   `json:"baseline"`
	Limit     float64   `json:"limit"`
	Evaluated bool      `json:"evaluated"` // false: too few sessions (min_sessions) or no baseline yet
	Alerting  bool      `json:"alerting"`
}

// StepIntervals turns per-bucket funnel tables into the abandonment series of
// funnel step s (0-based) of n steps: per interval (by session end), the
// sessions that reached step s in order (depth > s) and those of them that
// did not reach the last step (depth < n). Buckets are keyed by interval
// start.
func StepIntervals(from, to time.Time, interval time.Duration, s, n int, buckets map[int64]tally.Table) []alert.Interval {
	step := int64(interval / time.Second)
	var out []alert.Interval
	for s := from.Unix(); s < to.Unix(); s += step {
		out = append(out, alert.Interval{Start: time.Unix(s, 0).UTC()})
	}
	for b, t := range buckets {
		i := (b - from.Unix()) / step
		if i < 0 || int(i) >= len(out) {
			continue
		}
		for dims, v := range t {
			d, err := strconv.Atoi(dims)
			if err != nil || d <= s {
				continue
			}
			out[i].Sessions += v[0]
			if d < n {
				out[i].Abandons += v[0]
			}
		}
	}
	return out
}

// Alerts runs the abandonment detector over the series.
func Alerts(name string, plan Plan, interval time.Duration, series []alert.Interval, p alert.Params, withPoints bool) (AlertsAnswer, error) {
	a := AlertsAnswer{Name: name, Coverage: plan.Coverage, Interval: interval.String(), Alerts: []AlertRecord{}}
	pts, als, err := alert.Detect(series, p)
	if err != nil {
		return a, err
	}
	for _, x := range als {
		r := AlertRecord{Name: name, Opened: x.Opened.UTC(), Open: x.Closed.IsZero(),
			Rate: x.Rate, Baseline: x.Baseline, Limit: x.Limit, Peak: x.Peak}
		if !x.Closed.IsZero() {
			r.Closed = x.Closed.UTC()
		}
		a.Alerts = append(a.Alerts, r)
	}
	if withPoints {
		for _, pt := range pts {
			a.Points = append(a.Points, AlertPoint{Start: pt.Start.UTC(), Sessions: pt.Sessions, Abandons: pt.Abandons,
				Rate: pt.Rate, Statistic: pt.Statistic, Baseline: pt.Baseline, Limit: pt.UCL, Evaluated: pt.Evaluated, Alerting: pt.Alerting})
		}
	}
	return a, nil
}
