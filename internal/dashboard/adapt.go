package dashboard

import (
	"fmt"
	"math"
	"sort"
	"time"

	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/query"
)

// maxChannelColors is how many channels keep their own colour; beyond it
// the channels with least credit are folded into OtherChannel.
var maxChannelColors = len(Palette)

// OtherChannel names the folded channels in line and bar charts.
const OtherChannel = "other"

// Channels decides which channels are drawn on their own, in which order and
// colour: all of them when there are at most len(Palette), else the
// len(Palette)−1 with the most credit (by absolute credited conversions)
// plus OtherChannel. Kept channels are in name order and coloured by it, so
// a channel keeps its colour while the set of channels does not change.
type Channels struct {
	Names  []string // kept channels, by name, then OtherChannel when folding
	Colors map[string]string
	kept   map[string]bool
	folded bool
}

// NewChannels picks the channels from credit totals.
func NewChannels(totals map[string]float64) Channels {
	names := make([]string, 0, len(totals))
	for n := range totals {
		names = append(names, n)
	}
	sort.Slice(names, func(i, j int) bool {
		a, b := math.Abs(totals[names[i]]), math.Abs(totals[names[j]])
		if a != b {
			return a > b
		}
		return names[i] < names[j]
	})
	c := Channels{Colors: map[string]string{}, kept: map[string]bool{}}
	if len(names) > maxChannelColors {
		names = names[:maxChannelColors-1]
		c.folded = true
	}
	sort.Strings(names)
	for i, n := range names {
		c.kept[n] = true
		c.Colors[n] = Palette[i%len(Palette)]
	}
	c.Names = names
	if c.folded {
		c.Names = append(c.Names, OtherChannel)
		c.Colors[OtherChannel] = colorOther
	}
	return c
}

// Of returns the series a channel is drawn in.
func (c Channels) Of(channel string) string {
	if c.kept[channel] {
		return channel
	}
	return OtherChannel
}

// creditTotals sums credited conversions per channel over answers.
func creditTotals(shift query.ShiftAnswer, credits []ModelCredit) map[string]float64 {
	t := map[string]float64{}
	for _, d := range shift.Days {
		for _, c := range d.Channels {
			t[c.Channel] += math.Abs(c.Conversions)
		}
	}
	for _, m := range credits {
		for _, c := range m.Answer.Channels {
			t[c.Channel] += math.Abs(c.Conversions)
		}
	}
	return t
}

// ShiftSeries turns a shift answer into x labels (one per day, "Oct 14")
// and one series per channel of credited conversions per day. Folded
// channels are summed.
func ShiftSeries(a query.ShiftAnswer, ch Channels) ([]string, []Series) {
	x := make([]string, len(a.Days))
	idx := map[string]int{}
	series := make([]Series, len(ch.Names))
	for i, n := range ch.Names {
		idx[n] = i
		series[i] = Series{Name: n, Color: ch.Colors[n], Values: make([]float64, len(a.Days)), Tips: make([]string, len(a.Days))}
	}
	for j, d := range a.Days {
		x[j] = dayLabel(d.Day)
		share := map[string]float64{}
		for _, c := range d.Channels {
			i, ok := idx[ch.Of(c.Channel)]
			if !ok {
				continue
			}
			series[i].Values[j] += c.Conversions
			share[series[i].Name] += c.Share
		}
		for i := range series {
			series[i].Tips[j] = series[i].Name + ", " + d.Day + ": " + Number.format(series[i].Values[j]) +
				" conversions credited (" + Percent.format(share[series[i].Name]) + " of the day's credit)"
		}
	}
	return x, series
}

// dayLabel shows "2026-10-14" as "Oct 14".
func dayLabel(day string) string {
	t, err := time.Parse("2006-01-02", day)
	if err != nil {
		return day
	}
	return t.Format("Jan 2")
}

// ModelCredit is one model's credit answer for the window.
type ModelCredit struct {
	Model  string // the name asked for, e.g. "markov"
	Answer query.CreditAnswer
	Err    error
}

// ModelSeries turns credit answers into groups (one per model that
// answered) and one series per channel of credit shares; a channel a model
// did not credit has share 0. Folded channels are summed.
func ModelSeries(credits []ModelCredit, ch Channels) ([]string, []Series) {
	var groups []string
	var answered []ModelCredit
	for _, m := range credits {
		if m.Err == nil {
			groups = append(groups, m.Model)
			answered = append(answered, m)
		}
	}
	series := make([]Series, len(ch.Names))
	idx := map[string]int{}
	for i, n := range ch.Names {
		idx[n] = i
		series[i] = Series{Name: n, Color: ch.Colors[n], Values: make([]float64, len(groups)), Tips: make([]string, len(groups))}
	}
	for g, m := range answered {
		conv := make([]float64, len(series))
		for _, c := range m.Answer.Channels {
			i, ok := idx[ch.Of(c.Channel)]
			if !ok {
				continue
			}
			series[i].Values[g] += c.Share
			conv[i] += c.Conversions
		}
		for i := range series {
			series[i].Tips[g] = m.Model + " · " + series[i].Name + ": " + Percent.format(series[i].Values[g]) +
				" of credit (" + Number.format(conv[i]) + " conversions)"
		}
	}
	return groups, series
}

// Row and column markers of the channel transition matrix, as the query
// answer names them.
const (
	stateStart      = event.StateEntry
	stateConversion = event.StateConverted
	stateNull       = event.StateLost
)

// TransitionGrid lays a channel transition answer out as a matrix: rows
// @entry then the channels by name, columns the channels then @converted and
// @lost; a cell is the row probability of the transition with its count.
func TransitionGrid(a query.TransitionsAnswer) (rows, cols []string, cells [][]HeatCell) {
	seen := map[string]bool{}
	for _, t := range a.Transitions {
		for _, s := range []string{t.From, t.To} {
			if s != stateStart && s != stateConversion && s != stateNull {
				seen[s] = true
			}
		}
	}
	var chans []string
	for s := range seen {
		chans = append(chans, s)
	}
	sort.Strings(chans)
	if len(a.Transitions) == 0 {
		return nil, nil, nil
	}
	rows = append([]string{stateStart}, chans...)
	cols = append(append([]string{}, chans...), stateConversion, stateNull)
	ri, ci := map[string]int{}, map[string]int{}
	for i, r := range rows {
		ri[r] = i
	}
	for j, c := range cols {
		ci[c] = j
	}
	cells = make([][]HeatCell, len(rows))
	for i := range cells {
		cells[i] = make([]HeatCell, len(cols))
	}
	for _, t := range a.Transitions {
		i, ok1 := ri[t.From]
		j, ok2 := ci[t.To]
		if !ok1 || !ok2 {
			continue
		}
		cells[i][j] = HeatCell{Has: true, Value: t.Probability, Count: t.Count,
			Tip: "from " + t.From + " to " + t.To + ": " + Percent.format(t.Probability) + " of the transitions out of " + t.From +
				" (" + Count.format(float64(t.Count)) + ")"}
	}
	return rows, cols, cells
}

// FlowFrom builds the flow of the main action paths, with all action
// transitions for the tooltips.
func FlowFrom(paths query.PathsAnswer, actions query.TransitionsAnswer) FlowData {
	d := FlowData{Sessions: paths.Total, Start: event.StateEntry, End: event.StateExit}
	for _, p := range paths.Paths {
		if len(p.Path) == 0 {
			continue
		}
		d.Paths = append(d.Paths, FlowPath{Steps: p.Path, Count: p.Count, Conversions: p.Conversions})
	}
	for _, t := range actions.Transitions {
		d.Next = append(d.Next, FlowLink{From: t.From, To: t.To, Count: t.Count, Probability: t.Probability})
	}
	return d
}

// FunnelBars lists a funnel answer's steps.
func FunnelBars(a query.FunnelAnswer) []FunnelBar {
	out := make([]FunnelBar, len(a.Steps))
	for i, s := range a.Steps {
		out[i] = FunnelBar{Step: s.Step, Sessions: s.Sessions, Abandonment: orZero(s.Abandonment)}
	}
	return out
}

// ControlFrom reads an alerts answer with points into chart data.
func ControlFrom(a query.AlertsAnswer) (ControlData, error) {
	var d ControlData
	if a.Interval != "" {
		iv, err := time.ParseDuration(a.Interval)
		if err != nil {
			return d, fmt.Errorf("alert interval %q: %w", a.Interval, err)
		}
		d.Interval = iv
	}
	for _, p := range a.Points {
		t, err := time.Parse(time.RFC3339, p.Start)
		if err != nil {
			return d, fmt.Errorf("alert point start %q: %w", p.Start, err)
		}
		d.Points = append(d.Points, ControlPoint{Start: t, Sessions: p.Sessions, Rate: p.Rate, Statistic: p.Statistic,
			Limit: p.Limit, Baseline: p.Baseline, Evaluated: p.Evaluated})
	}
	for _, al := range a.Alerts {
		opened, err := time.Parse(time.RFC3339, al.Opened)
		if err != nil {
			return d, fmt.Errorf("alert opened %q: %w", al.Opened, err)
		}
		b := AlertBand{Opened: opened, Peak: al.Peak, Limit: al.Limit, OpenedText: al.Opened, ClosedText: al.Closed}
		if al.Closed != "" {
			if b.Closed, err = time.Parse(time.RFC3339, al.Closed); err != nil {
				return d, fmt.Errorf("alert closed %q: %w", al.Closed, err)
			}
		}
		d.Alerts = append(d.Alerts, b)
	}
	return d, nil
}

// zoomPad is the time shown either side of an alert in the close-up.
const zoomPad = 4 * time.Hour

// Zoom cuts the chart data to the latest alert and zoomPad either side of
// it, or to the last day when there is no alert. It reports what it shows.
func Zoom(d ControlData) (ControlData, string) {
	if len(d.Points) == 0 {
		return d, "the last day"
	}
	end := d.Points[len(d.Points)-1].Start.Add(d.Interval)
	from, to := end.Add(-24*time.Hour), end
	what := "the last day"
	if n := len(d.Alerts); n > 0 {
		a := d.Alerts[n-1]
		closed := a.Closed
		if closed.IsZero() {
			closed = end
		}
		from, to = a.Opened.Add(-zoomPad), closed.Add(zoomPad)
		what = "the latest alert"
	}
	out := ControlData{Interval: d.Interval}
	for _, p := range d.Points {
		if !p.Start.Before(from) && p.Start.Before(to) {
			out.Points = append(out.Points, p)
		}
	}
	for _, a := range d.Alerts {
		if a.Opened.Before(to) && (a.Closed.IsZero() || a.Closed.After(from)) {
			out.Alerts = append(out.Alerts, a)
		}
	}
	return out, what
}

// orZero reads an optional share of an answer; nil (unknown: a last funnel
// step, a step no session reached) draws as 0.
func orZero(x *float64) float64 {
	if x == nil {
		return 0
	}
	return *x
}
