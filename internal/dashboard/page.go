package dashboard

import (
	"bytes"
	_ "embed"
	"fmt"
	"html/template"
	"math"
	"sort"
	"strconv"
	"strings"
	"time"

	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/query"
)

// Selection is what the reader chose: the model of the daily chart, the
// window of the other charts and the days of the daily chart.
type Selection struct {
	Model string
	Last  time.Duration
	Days  int
}

// Answers are the query answers one page is drawn from: the same answers
// the JSON API gives for the same parameters. An error instead of an answer
// makes its chart show the error; the rest of the page still renders.
type Answers struct {
	Latest      time.Time
	Shift       query.ShiftAnswer
	ShiftErr    error
	Credit      []ModelCredit // one per model, in the page's model order
	Channels    query.TransitionsAnswer
	ChannelsErr error
	Actions     query.TransitionsAnswer
	Paths       query.PathsAnswer
	FlowErr     error
	Funnel      query.FunnelAnswer
	FunnelErr   error
	Alerts      query.AlertsAnswer
	AlertsErr   error
	// Truth, when set, is a simulated world's true effect per channel (a
	// demo --truth file): the model comparison shows it as rings.
	Truth *query.Truth
}

// MainPaths is how many action paths the flow shows.
const MainPaths = 8

// RefreshSeconds is the page's reload period.
const RefreshSeconds = 30

// Page is the page's data, ready for the template.
type Page struct {
	Title    string
	Refresh  int
	Latest   string // latest event time, UTC
	Window   string // the window the charts cover
	Warnings []string
	Form     Form
	Charts   []Chart
	CSS      string // stylesheet path, with a content hash for caching
}

// Form holds the controls' current values and choices.
type Form struct {
	Models []Option
	Lasts  []Option
	Days   []Option
}

// Option is one choice of a select control.
type Option struct {
	Value, Label string
	Selected     bool
}

// Chart is one section of the page: a heading, a lead line, the SVG, a
// text summary and the numbers as a table.
type Chart struct {
	ID      string
	Heading string
	Lead    string
	SVG     template.HTML
	Summary string
	Notes   []string
	Err     string
	Table   Table
	Wide    bool
}

// Table is a chart's numbers for readers who cannot see it.
type Table struct {
	Caption string
	Head    []string
	Rows    [][]string
}

// Build lays out the page from the answers (no I/O: the same answers give
// the same page).
func Build(a Answers, sel Selection, models []string, title string) Page {
	p := Page{Title: title, Refresh: RefreshSeconds, Latest: a.Latest.UTC().Format("2006-01-02 15:04:05") + " UTC",
		Window: "last " + durationLabel(sel.Last) + " up to the latest event", Form: form(sel, models), CSS: cssPath}
	if !a.Funnel.From.IsZero() {
		p.Window += " (" + timeText(a.Funnel.From) + " to " + timeText(a.Funnel.To) + ")"
	}
	p.Warnings = partialWarnings(a)
	ch := NewChannels(creditTotals(a.Shift, a.Credit))
	p.Charts = []Chart{
		shiftChart(a, sel, ch),
		channelMatrixChart(a),
		modelsChart(a, sel, ch),
		flowChart(a),
		funnelChart(a),
		alertZoomChart(a),
		alertChart(a, sel),
	}
	return p
}

func partialWarnings(a Answers) []string {
	missing := map[int]bool{}
	add := func(ps []int) {
		for _, p := range ps {
			missing[p] = true
		}
	}
	add(a.Shift.MissingPartitions)
	for _, m := range a.Credit {
		add(m.Answer.MissingPartitions)
	}
	add(a.Channels.MissingPartitions)
	add(a.Actions.MissingPartitions)
	add(a.Paths.MissingPartitions)
	add(a.Funnel.MissingPartitions)
	add(a.Alerts.MissingPartitions)
	if len(missing) == 0 {
		return nil
	}
	ps := make([]int, 0, len(missing))
	for p := range missing {
		ps = append(ps, p)
	}
	sort.Ints(ps)
	return []string{query.PartialWarning(ps) + ": the charts leave their data out"}
}

// Choices offered by the controls (a value given in the address that is not
// among them is added).
var (
	lastChoices = []time.Duration{24 * time.Hour, 7 * 24 * time.Hour, 14 * 24 * time.Hour, 30 * 24 * time.Hour, 90 * 24 * time.Hour}
	dayChoices  = []int{7, 14, 28, 56}
)

func form(sel Selection, models []string) Form {
	var f Form
	for _, m := range models {
		f.Models = append(f.Models, Option{Value: m, Label: m, Selected: m == sel.Model})
	}
	lasts := lastChoices
	if !contains(lasts, sel.Last) {
		lasts = append(append([]time.Duration{}, lasts...), sel.Last)
		sort.Slice(lasts, func(i, j int) bool { return lasts[i] < lasts[j] })
	}
	for _, d := range lasts {
		f.Lasts = append(f.Lasts, Option{Value: durationLabel(d), Label: durationLabel(d), Selected: d == sel.Last})
	}
	days := dayChoices
	if !contains(days, sel.Days) {
		days = append(append([]int{}, days...), sel.Days)
		sort.Ints(days)
	}
	for _, d := range days {
		f.Days = append(f.Days, Option{Value: strconv.Itoa(d), Label: strconv.Itoa(d) + " days", Selected: d == sel.Days})
	}
	return f
}

func contains[T comparable](xs []T, x T) bool {
	for _, y := range xs {
		if y == x {
			return true
		}
	}
	return false
}

// durationLabel writes a window length the way the last= parameter takes
// it: 7d, 12h, 1d12h, 90m.
func durationLabel(d time.Duration) string {
	day := 24 * time.Hour
	var b strings.Builder
	if d >= day {
		b.WriteString(strconv.FormatInt(int64(d/day), 10) + "d")
		d %= day
	}
	if d >= time.Hour {
		b.WriteString(strconv.FormatInt(int64(d/time.Hour), 10) + "h")
		d %= time.Hour
	}
	if d > 0 || b.Len() == 0 {
		b.WriteString(strconv.FormatInt(int64(d/time.Minute), 10) + "m")
	}
	return b.String()
}

func errText(err error) string {
	if err == nil {
		return ""
	}
	return "This chart could not be computed: " + err.Error()
}

func shiftChart(a Answers, sel Selection, ch Channels) Chart {
	c := Chart{ID: "credit-days", Heading: "Credit per channel per day",
		Lead: fmt.Sprintf("Conversions credited to each channel per UTC day under the %s model, last %d days.", sel.Model, sel.Days)}
	if a.ShiftErr != nil {
		c.Err = errText(a.ShiftErr)
		return c
	}
	x, series := ShiftSeries(a.Shift, ch)
	c.SVG = template.HTML(LineChart(x, series, Frame{ID: c.ID, Title: c.Heading + " (" + sel.Model + ")",
		Desc: c.Lead + " One line per channel.", XLabel: "day (UTC)", YLabel: "conversions credited", Unit: Number}))
	c.Summary = shiftSummary(a.Shift)
	c.Table = Table{Caption: "Conversions credited per day (" + sel.Model + ")", Head: append([]string{"day"}, ch.Names...)}
	for j, d := range a.Shift.Days {
		row := []string{d.Day}
		for _, s := range series {
			row = append(row, Number.format(s.Values[j]))
		}
		c.Table.Rows = append(c.Table.Rows, row)
	}
	return c
}

func shiftSummary(a query.ShiftAnswer) string {
	if len(a.Days) == 0 || len(a.Channels) == 0 {
		return "No conversions were credited in these days."
	}
	last := a.Days[len(a.Days)-1]
	if last.Conversions == 0 {
		return fmt.Sprintf("No conversions were credited on %s, the latest day.", last.Day)
	}
	top := query.ShiftCell{Conversions: math.Inf(-1)}
	for _, c := range last.Channels {
		if c.Conversions > top.Conversions {
			top = c
		}
	}
	s := fmt.Sprintf("On %s, %s received the most credit: %s conversions (%s of the day's %d).",
		last.Day, top.Channel, Number.format(top.Conversions), Percent.format(top.Share), last.Conversions)
	begin := 0 // the first day with conversions
	for begin < len(a.Days)-1 && a.Days[begin].Conversions == 0 {
		begin++
	}
	if begin < len(a.Days)-1 {
		first := a.Days[begin]
		var name string
		var from, to, change float64
		for i, c := range last.Channels {
			if i >= len(first.Channels) {
				break
			}
			if d := c.Share - first.Channels[i].Share; math.Abs(d) > math.Abs(change) {
				name, from, to, change = c.Channel, first.Channels[i].Share, c.Share, d
			}
		}
		if name != "" {
			s += fmt.Sprintf(" The largest move since %s: %s went from %s to %s of the day's credit.", first.Day, name, Percent.format(from), Percent.format(to))
		}
	}
	return s
}

func channelMatrixChart(a Answers) Chart {
	c := Chart{ID: "channel-transitions", Heading: "Where journeys go next",
		Lead: "For each state, the share of next steps going to each channel, to a conversion (@converted) or to a journey ending without one (@lost). First-order transitions of the window's journeys."}
	if a.ChannelsErr != nil {
		c.Err = errText(a.ChannelsErr)
		return c
	}
	rows, cols, cells := TransitionGrid(a.Channels)
	c.SVG = template.HTML(Heatmap(rows, cols, cells, Frame{ID: c.ID, Title: "Channel transition probabilities",
		Desc:   "Heatmap: rows are @entry (the journey start) and each channel, columns the next channel, @converted or @lost; each cell is the row probability, darker is higher.",
		XLabel: "row probability (transitions out of the row's state)", Unit: Percent}))
	c.Summary = matrixSummary(a.Channels)
	c.Table = Table{Caption: "Transition probabilities (count)", Head: append([]string{"from \\ to"}, cols...)}
	for i, r := range rows {
		row := []string{r}
		for _, cell := range cells[i] {
			if cell.Has {
				row = append(row, Percent.format(cell.Value)+" ("+Count.format(float64(cell.Count))+")")
			} else {
				row = append(row, "–")
			}
		}
		c.Table.Rows = append(c.Table.Rows, row)
	}
	return c
}

func matrixSummary(a query.TransitionsAnswer) string {
	var first, conv query.Transition
	for _, t := range a.Transitions {
		if t.From == event.StateEntry && t.Probability > first.Probability {
			first = t
		}
		if t.To == event.StateConverted && t.From != event.StateEntry && t.Probability > conv.Probability {
			conv = t
		}
	}
	if first.From == "" {
		return "No journeys with a channel touch in this window."
	}
	s := fmt.Sprintf("Journeys most often start with %s (%s).", first.To, Percent.format(first.Probability))
	if conv.From != "" {
		s += fmt.Sprintf(" A touch of %s is most often followed by a conversion (%s of its next steps).", conv.From, Percent.format(conv.Probability))
	}
	return s
}

func modelsChart(a Answers, sel Selection, ch Channels) Chart {
	c := Chart{ID: "credit-models", Heading: "All models side by side", Wide: true,
		Lead: "Each channel's share of the credited conversions under every model over the last " + durationLabel(sel.Last) +
			": one row per channel, one mark per model; the grey bar spans the models' smallest to largest share."}
	if a.Truth != nil {
		c.Lead = "Each touch channel's share of the credit under every model over the last " + durationLabel(sel.Last) +
			", next to the simulated world's true share (the ring: the conversions the channel truly caused, from the truth file). " +
			"Shares are over the simulated channels only, as in query scorecard; the direct channel has no true effect to compare."
	}
	var errs []string
	for _, m := range a.Credit {
		if m.Err != nil {
			errs = append(errs, m.Model+": "+m.Err.Error())
		}
		for _, n := range m.Answer.Notes {
			c.Notes = append(c.Notes, m.Model+": "+n)
		}
	}
	if len(errs) > 0 {
		c.Err = "Some models could not be computed: " + strings.Join(errs, "; ")
	}
	models, rows := ModelDots(a.Credit, ch, a.Truth)
	if len(models) == 0 {
		return c
	}
	desc := "Dot plot: one row per channel, one mark per attribution model (each model its own colour and shape) at the channel's share of credited conversions."
	if a.Truth != nil {
		desc += " A ring marks the simulated true share."
	}
	c.SVG = template.HTML(DotPlot(models, rows, "simulated true share", Frame{ID: c.ID, Title: "Credit share per channel under each model",
		Desc: desc, XLabel: "share of credited conversions", Unit: Percent}))
	c.Summary = modelsSummary(models, rows, a.Truth != nil)
	head := append([]string{"channel"}, models...)
	if a.Truth != nil {
		head = append(head, "true share")
	}
	c.Table = Table{Caption: "Share of credited conversions", Head: head}
	for _, r := range rows {
		row := []string{r.Name}
		for _, v := range r.Values {
			row = append(row, Percent.format(v))
		}
		if r.HasRef {
			row = append(row, Percent.format(r.Ref))
		}
		c.Table.Rows = append(c.Table.Rows, row)
	}
	return c
}

// modelsSummary names the channel the models disagree about most and, with
// a truth, the model closest to it (smallest Σ|share − true share|).
func modelsSummary(models []string, rows []DotRow, truth bool) string {
	if len(models) < 2 || len(rows) == 0 {
		return ""
	}
	best, bestRange := -1, -1.0
	var lo, hi int
	for i, r := range rows {
		l, h := 0, 0
		for m, v := range r.Values {
			if v < r.Values[l] {
				l = m
			}
			if v > r.Values[h] {
				h = m
			}
		}
		if d := r.Values[h] - r.Values[l]; d > bestRange {
			best, bestRange, lo, hi = i, d, l, h
		}
	}
	r := rows[best]
	s := fmt.Sprintf("The models disagree most about %s: from %s of credit (%s) to %s (%s).",
		r.Name, Percent.format(r.Values[lo]), models[lo], Percent.format(r.Values[hi]), models[hi])
	if truth {
		closest, err := -1, math.Inf(1)
		for m := range models {
			var e float64
			for _, r := range rows {
				e += math.Abs(r.Values[m] - r.Ref)
			}
			if e < err {
				closest, err = m, e
			}
		}
		s += fmt.Sprintf(" Closest to the simulated truth: %s (Σ|share − true share| = %s).", models[closest], strconv.FormatFloat(err, 'f', 3, 64))
	}
	return s
}

func flowChart(a Answers) Chart {
	c := Chart{ID: "action-flow", Heading: "Where sessions go next", Wide: true,
		Lead: "For the session's start and each action, the share of next steps going to each action or ending the session (" +
			event.StateExit + "), over every step of the window's sessions."}
	if a.FlowErr != nil {
		c.Err = errText(a.FlowErr)
		return c
	}
	var steps []string
	for _, s := range a.Funnel.Steps {
		steps = append(steps, s.Step)
	}
	rows, cols := NextStepsFrom(a.Actions, steps)
	c.SVG = template.HTML(NextSteps(rows, cols, event.StateExit, Frame{ID: c.ID, Title: "Next step shares in sessions",
		Desc: "Table of bars: one row per state (" + event.StateEntry + " and each action), one column per next state; each bar is the row's share of steps going there."}))
	c.Summary = flowSummary(a.Paths)
	c.Table = Table{Caption: "Next steps (share of the row's steps, count)", Head: append([]string{"from \\ next", "steps out"}, cols...)}
	for _, r := range rows {
		row := []string{r.From, Count.format(float64(r.Total))}
		for _, cell := range r.Cells {
			if cell.Has {
				row = append(row, Percent.format(cell.Share)+" ("+Count.format(float64(cell.Count))+")")
			} else {
				row = append(row, "–")
			}
		}
		c.Table.Rows = append(c.Table.Rows, row)
	}
	return c
}

func flowSummary(a query.PathsAnswer) string {
	if len(a.Paths) == 0 {
		return "No sessions ended in this window."
	}
	top := a.Paths[0]
	s := fmt.Sprintf("The most common session is %q: %s sessions (%s of %s), %s of them converting.",
		top.Key(), Count.format(float64(top.Count)), Percent.format(top.Share), Count.format(float64(a.Total)), Percent.format(top.ConversionRate))
	for _, p := range a.Paths {
		if p.Conversions > 0 {
			s += fmt.Sprintf(" The most common converting session is %q (%s sessions).", p.Key(), Count.format(float64(p.Count)))
			break
		}
	}
	return s
}

func funnelChart(a Answers) Chart {
	c := Chart{ID: "funnel", Heading: "Funnel and step abandonment",
		Lead: "Sessions that reached each step in order, and the share that left before the next step."}
	if a.FunnelErr != nil {
		c.Err = errText(a.FunnelErr)
		return c
	}
	c.SVG = template.HTML(FunnelChart(FunnelBars(a.Funnel), Frame{ID: c.ID, Title: "Funnel",
		Desc:   "Horizontal bars, one per funnel step, proportional to the sessions that reached it; the orange end of a bar is the sessions that left at that step.",
		XLabel: "bar length: sessions that reached the step", Unit: Count}))
	c.Summary = funnelSummary(a.Funnel)
	c.Table = Table{Caption: "Funnel steps", Head: []string{"step", "sessions", "left before the next step"}}
	for i, s := range a.Funnel.Steps {
		left := "–"
		if i < len(a.Funnel.Steps)-1 {
			if s.Abandonment != nil {
				left = Percent.format(*s.Abandonment)
			}
		}
		c.Table.Rows = append(c.Table.Rows, []string{s.Step, Count.format(float64(s.Sessions)), left})
	}
	return c
}

func funnelSummary(a query.FunnelAnswer) string {
	if len(a.Steps) == 0 || a.Steps[0].Sessions == 0 {
		return "No session reached the first step in this window."
	}
	worst := 0
	for i := range a.Steps[:len(a.Steps)-1] {
		if orZero(a.Steps[i].Abandonment) > orZero(a.Steps[worst].Abandonment) {
			worst = i
		}
	}
	s := fmt.Sprintf("%s sessions reached %s; %s of them went all the way to %s.", Count.format(float64(a.Steps[0].Sessions)),
		a.Steps[0].Step, Percent.format(orZero(a.OverallConversion)), a.Steps[len(a.Steps)-1].Step)
	if len(a.Steps) > 1 {
		s += fmt.Sprintf(" The biggest loss is after %s: %s left before %s.", a.Steps[worst].Step, Percent.format(orZero(a.Steps[worst].Abandonment)), a.Steps[worst+1].Step)
	}
	if a.BasketAbandonment != nil {
		s += fmt.Sprintf(" Basket abandonment: %s of %s basket sessions.", Percent.format(*a.BasketAbandonment), Count.format(float64(a.BasketSessions)))
	}
	return s
}

// watched names what the alert chart watches, e.g. "checkout abandonment".
func watched(a query.AlertsAnswer) string {
	if a.Name == "" {
		return "abandonment"
	}
	return strings.ReplaceAll(a.Name, "_", " ")
}

func alertChart(a Answers, sel Selection) Chart {
	c := Chart{ID: "abandonment", Heading: "Abandonment over time", Wide: true,
		Lead: "The " + watched(a.Alerts) + " rate per interval over the last " + durationLabel(sel.Last) + ", its EWMA statistic and upper control limit; shaded periods are alerts."}
	if a.AlertsErr != nil {
		c.Err = errText(a.AlertsErr)
		return c
	}
	d, err := ControlFrom(a.Alerts)
	if err != nil {
		c.Err = errText(err)
		return c
	}
	c.SVG = template.HTML(ControlChart(d, Frame{ID: c.ID, Title: "Abandonment rate with control limit and alerts",
		Desc:   "Line chart over time of the " + watched(a.Alerts) + " rate per interval, the EWMA statistic and the upper control limit; alert periods shaded.",
		XLabel: "time (UTC), interval " + shortDuration(d.Interval), YLabel: watched(a.Alerts) + " rate"}))
	c.Summary = alertSummary(a.Alerts)
	c.Table = alertTable(a.Alerts)
	return c
}

func alertZoomChart(a Answers) Chart {
	c := Chart{ID: "abandonment-zoom", Heading: "Abandonment close-up"}
	if a.AlertsErr != nil {
		c.Err = errText(a.AlertsErr)
		return c
	}
	d, err := ControlFrom(a.Alerts)
	if err != nil {
		c.Err = errText(err)
		return c
	}
	z, what := Zoom(d)
	c.Lead = "The same chart around " + what + "."
	c.SVG = template.HTML(ControlChart(z, Frame{ID: c.ID, Title: "Abandonment close-up around " + what, Width: 640,
		Desc:   "The abandonment control chart cut to " + what + ": rate per interval, EWMA statistic, upper control limit and alert periods.",
		XLabel: "time (UTC)", YLabel: watched(a.Alerts) + " rate"}))
	c.Summary = zoomSummary(z)
	c.Table = Table{Caption: "Intervals shown", Head: []string{"interval start (UTC)", "sessions", "rate", "EWMA", "limit", "alert"}}
	inAlert := func(t time.Time) bool {
		for _, al := range z.Alerts {
			if !t.Before(al.Opened) && (al.Closed.IsZero() || t.Before(al.Closed)) {
				return true
			}
		}
		return false
	}
	for _, p := range z.Points {
		mark := ""
		if inAlert(p.Start) {
			mark = "open"
		}
		c.Table.Rows = append(c.Table.Rows, []string{p.Start.UTC().Format("2006-01-02 15:04"), Count.format(float64(p.Sessions)),
			Percent.format(p.Rate), Percent.format(p.Statistic), Percent.format(p.Limit), mark})
	}
	return c
}

func zoomSummary(z ControlData) string {
	if len(z.Points) == 0 {
		return "No intervals to show."
	}
	peak := z.Points[0]
	for _, p := range z.Points {
		if p.Sessions > 0 && p.Rate > peak.Rate {
			peak = p
		}
	}
	return fmt.Sprintf("From %s to %s UTC; the highest rate, %s of %s sessions, was in the interval starting %s.",
		z.Points[0].Start.UTC().Format("Jan 2 15:04"), z.Points[len(z.Points)-1].Start.Add(z.Interval).UTC().Format("Jan 2 15:04"),
		Percent.format(peak.Rate), Count.format(float64(peak.Sessions)), peak.Start.UTC().Format("Jan 2 15:04"))
}

func alertSummary(a query.AlertsAnswer) string {
	if len(a.Alerts) == 0 {
		s := "No alert in this window."
		if n := len(a.Points); n > 0 {
			p := a.Points[n-1]
			s += fmt.Sprintf(" The latest interval's rate is %s against a limit of %s.", Percent.format(p.Rate), Percent.format(p.Limit))
		}
		return s
	}
	al := a.Alerts[len(a.Alerts)-1]
	when := "is still open"
	if !al.Open {
		when = "closed " + timeText(al.Closed)
	}
	count := "One alert"
	if len(a.Alerts) > 1 {
		count = strconv.Itoa(len(a.Alerts)) + " alerts"
	}
	return fmt.Sprintf("%s in this window. The latest opened %s and %s; its rate peaked at %s against a baseline of %s and a limit of %s.",
		count, timeText(al.Opened), when, Percent.format(al.Peak), Percent.format(al.Baseline), Percent.format(al.Limit))
}

// timeText shows a time of an answer as "Oct 8 15:15 UTC".
func timeText(t time.Time) string { return t.UTC().Format("Jan 2 15:04") + " UTC" }

func alertTable(a query.AlertsAnswer) Table {
	t := Table{Caption: "Alerts in the window", Head: []string{"opened", "closed", "rate at opening", "peak", "baseline", "limit"}}
	for _, al := range a.Alerts {
		closed := "still open"
		if !al.Closed.IsZero() {
			closed = query.FormatTime(al.Closed)
		}
		t.Rows = append(t.Rows, []string{query.FormatTime(al.Opened), closed, Percent.format(al.Rate), Percent.format(al.Peak), Percent.format(al.Baseline), Percent.format(al.Limit)})
	}
	return t
}

//go:embed page.html
var pageSource string

var pageTemplate = template.Must(template.New("page").Parse(pageSource))

// Render writes the page as HTML.
func Render(p Page) ([]byte, error) {
	var b bytes.Buffer
	if err := pageTemplate.Execute(&b, p); err != nil {
		return nil, fmt.Errorf("render dashboard page: %w", err)
	}
	return b.Bytes(), nil
}
