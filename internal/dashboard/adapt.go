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

// ModelDots turns credit answers into the rows of the model comparison:
// the models that answered (labelled with query.ModelLabel) and one row per
// channel holding each model's share of credit.
//
// Without a truth the shares are the answers' own, over every channel
// (folded as ch folds them). With a truth they are query.Scorecard's: each
// model's credit restricted to the truth's channels and normalised there, so
// a model's marks and the ring of the true share (incremental conversions /
// incremental total) sum to 1 over the same channels, exactly as `query
// scorecard` prints them; the direct channel, which a simulation cannot
// switch off, has no row then.
func ModelDots(credits []ModelCredit, ch Channels, truth *query.Truth) ([]string, []DotRow) {
	var models []string
	var answered []query.CreditAnswer
	for _, m := range credits {
		if m.Err == nil {
			models = append(models, query.ModelLabel(m.Answer.Model, m.Answer.Order))
			answered = append(answered, m.Answer)
		}
	}
	if truth != nil {
		sc := query.Scorecard(answered, *truth)
		byLabel := map[string]query.ModelScore{}
		for _, s := range sc.Models {
			byLabel[query.ModelLabel(s.Model, s.Order)] = s
		}
		rows := make([]DotRow, len(sc.Channels))
		for i, name := range sc.Channels {
			r := DotRow{Name: name, HasRef: true, Ref: sc.True[i], Values: make([]float64, len(models)), Tips: make([]string, len(models))}
			for m, label := range models {
				r.Values[m] = byLabel[label].Share[i]
				r.Tips[m] = label + " · " + name + ": " + Percent.format(r.Values[m]) + " of the credit over the simulated channels (true share " +
					Percent.format(r.Ref) + ")"
			}
			rows[i] = r
		}
		return models, rows
	}
	rows := make([]DotRow, len(ch.Names))
	idx := map[string]int{}
	for i, n := range ch.Names {
		idx[n] = i
		rows[i] = DotRow{Name: n, Values: make([]float64, len(models)), Tips: make([]string, len(models))}
	}
	for m, a := range answered {
		conv := make([]float64, len(rows))
		for _, c := range a.Channels {
			i, ok := idx[ch.Of(c.Channel)]
			if !ok {
				continue
			}
			rows[i].Values[m] += c.Share
			conv[i] += c.Conversions
		}
		for i := range rows {
			rows[i].Tips[m] = models[m] + " · " + rows[i].Name + ": " + Percent.format(rows[i].Values[m]) +
				" of credit (" + Number.format(conv[i]) + " conversions)"
		}
	}
	return models, rows
}

// TransitionGrid lays a channel transition answer out as a matrix: rows
// @entry then the channels by name, columns the channels then @converted and
// @lost; a cell is the row probability of the transition with its count.
func TransitionGrid(a query.TransitionsAnswer) (rows, cols []string, cells [][]HeatCell) {
	seen := map[string]bool{}
	for _, t := range a.Transitions {
		for _, s := range []string{t.From, t.To} {
			if s != event.StateEntry && s != event.StateConverted && s != event.StateLost {
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
	rows = append([]string{event.StateEntry}, chans...)
	cols = append(append([]string{}, chans...), event.StateConverted, event.StateLost)
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

// maxNextActions is how many actions the next-step table shows as rows and
// columns; the rest are folded into OtherActions.
const maxNextActions = 9

// OtherActions names the folded actions of the next-step table.
const OtherActions = "(other actions)"

// NextStepsFrom builds the next-step table from the action transitions of
// sessions (@entry → a1 → … → an → @exit, repeats kept): rows are @entry,
// then the actions; columns the actions, then @exit. Actions are ordered as
// the funnel steps first, then by the steps that leave them (most first,
// then by name); beyond maxNextActions the least used are folded into
// OtherActions. A row's shares are its transitions over all transitions out
// of it, so they sum to 1 across the row (the answer's row probabilities,
// added up where actions are folded).
func NextStepsFrom(actions query.TransitionsAnswer, funnelSteps []string) ([]NextRow, []string) {
	out := map[string]int64{}
	for _, t := range actions.Transitions {
		if t.From != event.StateEntry {
			out[t.From] += t.Count
		}
		if t.To != event.StateExit {
			out[t.To] += 0
		}
	}
	if len(actions.Transitions) == 0 {
		return nil, nil
	}
	rank := map[string]int{}
	for i, s := range funnelSteps {
		rank[s] = i + 1
	}
	names := make([]string, 0, len(out))
	for n := range out {
		names = append(names, n)
	}
	sort.Slice(names, func(i, j int) bool {
		a, b := names[i], names[j]
		if (rank[a] > 0) != (rank[b] > 0) {
			return rank[a] > 0
		}
		if rank[a] != rank[b] {
			return rank[a] < rank[b]
		}
		if out[a] != out[b] {
			return out[a] > out[b]
		}
		return a < b
	})
	kept := map[string]bool{}
	folded := false
	if len(names) > maxNextActions {
		byUse := append([]string{}, names...)
		sort.SliceStable(byUse, func(i, j int) bool { return out[byUse[i]] > out[byUse[j]] })
		for _, n := range byUse[:maxNextActions-1] {
			kept[n] = true
		}
		var keep []string
		for _, n := range names {
			if kept[n] {
				keep = append(keep, n)
			}
		}
		names, folded = keep, true
	} else {
		for _, n := range names {
			kept[n] = true
		}
	}
	of := func(s string) string {
		if s == event.StateEntry || s == event.StateExit || kept[s] {
			return s
		}
		return OtherActions
	}
	if folded {
		names = append(names, OtherActions)
	}
	cols := append(append([]string{}, names...), event.StateExit)
	rowNames := append([]string{event.StateEntry}, names...)
	col := map[string]int{}
	for j, c := range cols {
		col[c] = j
	}
	row := map[string]int{}
	rows := make([]NextRow, len(rowNames))
	for i, n := range rowNames {
		row[n] = i
		rows[i] = NextRow{From: n, Cells: make([]NextCell, len(cols))}
	}
	for _, t := range actions.Transitions {
		i, okR := row[of(t.From)]
		j, okC := col[of(t.To)]
		if !okR || !okC || t.Count == 0 {
			continue
		}
		rows[i].Total += t.Count
		rows[i].Cells[j].Has = true
		rows[i].Cells[j].Count += t.Count
	}
	for i := range rows {
		for j := range rows[i].Cells {
			if c := &rows[i].Cells[j]; c.Has {
				c.Share = float64(c.Count) / float64(rows[i].Total)
			}
		}
	}
	return rows, cols
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
		d.Points = append(d.Points, ControlPoint{Start: p.Start, Sessions: p.Sessions, Rate: p.Rate, Statistic: p.Statistic,
			Limit: p.Limit, Baseline: p.Baseline, Evaluated: p.Evaluated})
	}
	for _, al := range a.Alerts {
		b := AlertBand{Opened: al.Opened, Peak: al.Peak, Limit: al.Limit, OpenedText: query.FormatTime(al.Opened)}
		if !al.Closed.IsZero() {
			b.Closed, b.ClosedText = al.Closed, query.FormatTime(al.Closed)
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
