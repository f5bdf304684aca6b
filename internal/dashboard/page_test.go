package dashboard

import (
	"errors"
	"math"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/touchledger/touchledger/internal/query"
)

// fixedAnswers are query answers written by hand (invented numbers), with a
// hostile channel name among the channels.
func fixedAnswers() Answers {
	evil := hostile[0]
	latest := time.Date(2026, 10, 3, 18, 30, 0, 0, time.UTC)
	cell := func(ch string, conv, share float64) query.ShiftCell {
		return query.ShiftCell{Channel: ch, Conversions: conv, Value: conv * 20, Share: share}
	}
	a := Answers{Latest: latest}
	a.Shift = query.ShiftAnswer{Model: "linear", Channels: []string{evil, "direct", "search_ads"}, Days: []query.ShiftDay{
		{Day: "2026-10-01", Conversions: 0, Channels: []query.ShiftCell{cell(evil, 0, 0), cell("direct", 0, 0), cell("search_ads", 0, 0)}},
		{Day: "2026-10-02", Conversions: 10, Channels: []query.ShiftCell{cell(evil, 2.5, 0.25), cell("direct", 3, 0.3), cell("search_ads", 4.5, 0.45)}},
		{Day: "2026-10-03", Conversions: 8, Channels: []query.ShiftCell{cell(evil, 4, 0.5), cell("direct", 1, 0.125), cell("search_ads", 3, 0.375)}},
	}}
	credit := func(model string, shares map[string]float64) ModelCredit {
		c := query.CreditAnswer{Model: model, By: query.ByChannel, Conversions: 18, Value: 360}
		for ch, s := range shares {
			c.Channels = append(c.Channels, query.ChannelCredit{Channel: ch, Conversions: 18 * s, Value: 360 * s, Share: s})
		}
		query.SortChannels(c.Channels)
		return ModelCredit{Model: model, Answer: c}
	}
	a.Credit = []ModelCredit{
		credit("last-touch", map[string]float64{evil: 0.5, "direct": 0.2, "search_ads": 0.3}),
		credit("linear", map[string]float64{evil: 1.0 / 3, "direct": 1.0 / 6, "search_ads": 0.5}),
		credit("shapley", map[string]float64{evil: 1.1, "search_ads": -0.1}), // direct not credited
		{Model: "markov", Err: errors.New("markov: solver gave up")},
	}
	a.Channels = query.TransitionsAnswer{Level: "channel", Order: 1, Transitions: []query.Transition{
		{From: "@entry", To: "search_ads", Count: 6, Probability: 0.6},
		{From: "@entry", To: evil, Count: 4, Probability: 0.4},
		{From: evil, To: "@converted", Count: 3, Probability: 0.75},
		{From: evil, To: "search_ads", Count: 1, Probability: 0.25},
		{From: "search_ads", To: "@lost", Count: 5, Probability: 5.0 / 7},
		{From: "search_ads", To: "@converted", Count: 2, Probability: 2.0 / 7},
	}}
	a.Actions = query.TransitionsAnswer{Level: "action", Transitions: []query.Transition{
		{From: "@entry", To: "product_view", Count: 90, Probability: 0.9},
		{From: "@entry", To: "basket_add", Count: 10, Probability: 0.1},
		{From: "product_view", To: "@exit", Count: 60, Probability: 0.5},
		{From: "product_view", To: "basket_add", Count: 60, Probability: 0.5},
		{From: "basket_add", To: "@exit", Count: 70, Probability: 1},
	}}
	a.Paths = query.PathsAnswer{Level: "action", Total: 100, Paths: []query.PathStat{
		{Path: []string{"product_view"}, Count: 60, PathCount: 60, Share: 0.6},
		{Path: []string{"product_view", "basket_add"}, Count: 30, PathCount: 30, Share: 0.3, Conversions: 3, ConversionRate: 0.1},
		{Path: []string{"basket_add"}, Count: 10, PathCount: 10, Share: 0.1},
	}}
	a.Funnel = query.FunnelAnswer{Sessions: 100, Coverage: query.Coverage{From: time.Date(2026, 9, 4, 18, 0, 0, 0, time.UTC), To: time.Date(2026, 10, 3, 19, 0, 0, 0, time.UTC)}, Steps: []query.FunnelStep{
		{Step: "product_view", Sessions: 100, Abandonment: ptr(0.6)},
		{Step: "basket_add", Sessions: 40, Abandonment: ptr(0.75)},
		{Step: "checkout", Sessions: 10, Abandonment: ptr(0.3)},
		{Step: "order", Sessions: 7},
	}, BasketSessions: 40, BasketAbandonment: ptr(33.0 / 40), OverallConversion: ptr(0.07)}
	a.Alerts = query.AlertsAnswer{Name: "checkout_abandonment", Interval: (15 * time.Minute).String()}
	t0 := time.Date(2026, 10, 3, 12, 0, 0, 0, time.UTC)
	for i, r := range []float64{0, 0.3, 0.25, 0.35, 0.8, 0.9, 0.3, 0.2, 0.3} {
		p := query.AlertPoint{Start: t0.Add(time.Duration(i) * 15 * time.Minute), Sessions: 20, Abandons: int64(r * 20), Rate: r,
			Statistic: 0.3 + 0.01*float64(i), Baseline: 0.3, Limit: 0.5, Evaluated: i > 1}
		if i == 0 {
			p.Sessions, p.Abandons, p.Statistic, p.Baseline, p.Limit = 0, 0, 0, 0, 0
		}
		a.Alerts.Points = append(a.Alerts.Points, p)
	}
	a.Alerts.Alerts = []query.AlertRecord{{Name: "checkout_abandonment", Opened: t0.Add(60 * time.Minute),
		Closed: t0.Add(90 * time.Minute), Rate: 0.8, Baseline: 0.3, Limit: 0.5, Peak: 0.9}}
	return a
}

var fixedSelection = Selection{Model: "linear", Last: 30 * 24 * time.Hour, Days: 3}

// checkPage checks that every number a chart of the page carries is the
// query answer's number: the line chart's points are the shift answer's
// credited conversions, each mark a model's share, each heatmap cell a
// transition's probability and count, each next-step cell an action
// transition's probability and count, each funnel bar a step, and the control chart's lines
// and bands the alert answer's points and alerts. It needs at most
// len(Palette) channels (no folding).
func checkPage(t *testing.T, page []byte, a Answers) {
	t.Helper()
	charts := pageCharts(t, page)
	for _, id := range []string{"credit-days", "credit-models", "channel-transitions", "action-flow", "funnel", "abandonment", "abandonment-zoom"} {
		if charts[id] == nil {
			t.Fatalf("chart %s missing from the page", id)
		}
		if n := len(charts[id].all(withAttr("data-value"))) + len(charts[id].all(withAttr("data-values"))); n == 0 {
			t.Errorf("chart %s carries no values", id)
		}
	}

	// Credit per day.
	got := map[[2]string]float64{}
	for _, n := range charts["credit-days"].all(withAttr("data-value")) {
		got[[2]string{n.attr["data-series"], n.attr["data-x"]}] = float(t, n.attr["data-value"])
	}
	want := 0
	for _, d := range a.Shift.Days {
		for _, c := range d.Channels {
			want++
			k := [2]string{c.Channel, dayLabel(d.Day)}
			if v, ok := got[k]; !ok || v != c.Conversions {
				t.Errorf("credit-days %v = %v (drawn %v), want %v", k, v, ok, c.Conversions)
			}
		}
	}
	if len(got) != want {
		t.Errorf("credit-days: %d points, want %d", len(got), want)
	}

	// All models.
	got = map[[2]string]float64{}
	for _, n := range charts["credit-models"].all(func(n *xnode) bool { return n.attr["class"] == "mark" }) {
		got[[2]string{n.attr["data-model"], n.attr["data-row"]}] = float(t, n.attr["data-value"])
	}
	channels := map[string]bool{}
	for _, m := range a.Credit {
		for _, c := range m.Answer.Channels {
			channels[c.Channel] = true
		}
	}
	for _, d := range a.Shift.Days {
		for _, c := range d.Channels {
			channels[c.Channel] = true
		}
	}
	want = 0
	for _, m := range a.Credit {
		if m.Err != nil {
			for k := range got {
				if k[0] == m.Model {
					t.Errorf("credit-models: model %s failed but has marks", m.Model)
				}
			}
			continue
		}
		share := map[string]float64{}
		for _, c := range m.Answer.Channels {
			share[c.Channel] = c.Share
		}
		label := query.ModelLabel(m.Answer.Model, m.Answer.Order) // "markov (order 1)"
		for ch := range channels {
			want++
			if v, ok := got[[2]string{label, ch}]; !ok || v != share[ch] {
				t.Errorf("credit-models %s/%s = %v (drawn %v), want %v", m.Model, ch, v, ok, share[ch])
			}
		}
	}
	if len(got) != want {
		t.Errorf("credit-models: %d marks, want %d", len(got), want)
	}

	// Channel transitions.
	cells := charts["channel-transitions"].all(withAttr("data-value"))
	if len(cells) != len(a.Channels.Transitions) {
		t.Errorf("channel-transitions: %d cells, want %d", len(cells), len(a.Channels.Transitions))
	}
	byPair := map[[2]string]*xnode{}
	for _, n := range cells {
		byPair[[2]string{n.attr["data-row"], n.attr["data-col"]}] = n
	}
	for _, tr := range a.Channels.Transitions {
		n := byPair[[2]string{tr.From, tr.To}]
		if n == nil {
			t.Errorf("channel-transitions: no cell %s → %s", tr.From, tr.To)
			continue
		}
		if v := float(t, n.attr["data-value"]); v != tr.Probability {
			t.Errorf("channel-transitions %s → %s = %v, want %v", tr.From, tr.To, v, tr.Probability)
		}
		if c := n.attr["data-count"]; c != exactInt(tr.Count) {
			t.Errorf("channel-transitions %s → %s count = %s, want %d", tr.From, tr.To, c, tr.Count)
		}
	}

	// Where sessions go next: one cell per action transition, its share the
	// answer's row probability and its count the answer's count.
	next := charts["action-flow"].all(func(n *xnode) bool { return n.attr["class"] == "cell" })
	if len(next) != len(a.Actions.Transitions) {
		t.Errorf("action-flow: %d cells, want %d", len(next), len(a.Actions.Transitions))
	}
	nextPair := map[[2]string]*xnode{}
	for _, n := range next {
		nextPair[[2]string{n.attr["data-row"], n.attr["data-col"]}] = n
	}
	for _, tr := range a.Actions.Transitions {
		n := nextPair[[2]string{tr.From, tr.To}]
		if n == nil {
			t.Errorf("action-flow: no cell %s → %s", tr.From, tr.To)
			continue
		}
		if v := float(t, n.attr["data-value"]); math.Abs(v-tr.Probability) > 1e-15 || n.attr["data-count"] != exactInt(tr.Count) {
			t.Errorf("action-flow %s → %s = %v (%s), want %v (%d)", tr.From, tr.To, v, n.attr["data-count"], tr.Probability, tr.Count)
		}
	}

	// Funnel.
	steps := charts["funnel"].all(func(n *xnode) bool { return n.attr["class"] == "funnel-step" })
	if len(steps) != len(a.Funnel.Steps) {
		t.Errorf("funnel: %d steps, want %d", len(steps), len(a.Funnel.Steps))
	}
	for i, n := range steps {
		if i >= len(a.Funnel.Steps) {
			break
		}
		s := a.Funnel.Steps[i]
		if n.attr["data-step"] != s.Step || n.attr["data-value"] != exactInt(s.Sessions) || float(t, n.attr["data-abandonment"]) != orZero(s.Abandonment) {
			t.Errorf("funnel step %d = %v, want %+v", i, n.attr, s)
		}
	}

	// Abandonment: lines and bands.
	pts := a.Alerts.Points
	lead := 0
	for lead < len(pts)-1 && pts[lead].Sessions == 0 && !pts[lead].Evaluated {
		lead++
	}
	firstEval := -1
	for i := lead; i < len(pts); i++ {
		if pts[i].Evaluated {
			firstEval = i
			break
		}
	}
	var rate, stat, limit []string
	for i, p := range pts[lead:] {
		if p.Sessions > 0 {
			rate = append(rate, exact(p.Rate))
		}
		if firstEval >= 0 && lead+i >= firstEval {
			stat = append(stat, exact(p.Statistic))
			limit = append(limit, exact(p.Limit))
		}
	}
	full := map[string]string{}
	for _, n := range charts["abandonment"].all(withAttr("data-values")) {
		full[n.attr["class"]] = n.attr["data-values"]
	}
	for class, w := range map[string][]string{"rate": rate, "statistic": stat, "limit": limit} {
		if full[class] != strings.Join(w, " ") {
			t.Errorf("abandonment %s = %q, want %q", class, clip(full[class], 200), clip(strings.Join(w, " "), 200))
		}
	}
	bands := charts["abandonment"].all(func(n *xnode) bool { return n.attr["class"] == "alert-band" })
	if len(bands) != len(a.Alerts.Alerts) {
		t.Errorf("abandonment: %d bands, want %d", len(bands), len(a.Alerts.Alerts))
	}
	for i, n := range bands {
		if i < len(a.Alerts.Alerts) && (n.attr["data-opened"] != query.FormatTime(a.Alerts.Alerts[i].Opened) || n.attr["data-closed"] != closedText(a.Alerts.Alerts[i].Closed)) {
			t.Errorf("band %d = %s..%s, want %s..%s", i, n.attr["data-opened"], n.attr["data-closed"], a.Alerts.Alerts[i].Opened, a.Alerts.Alerts[i].Closed)
		}
	}
	// The close-up shows a run of the same intervals and the latest alert.
	for _, n := range charts["abandonment-zoom"].all(withAttr("data-values")) {
		class := n.attr["class"]
		if z := n.attr["data-values"]; !strings.Contains(" "+full[class]+" ", " "+z+" ") {
			t.Errorf("abandonment-zoom %s values are not a run of the full chart's", class)
		}
	}
	if n := len(a.Alerts.Alerts); n > 0 {
		zb := charts["abandonment-zoom"].all(func(n *xnode) bool { return n.attr["class"] == "alert-band" })
		if len(zb) == 0 || zb[len(zb)-1].attr["data-opened"] != query.FormatTime(a.Alerts.Alerts[n-1].Opened) {
			t.Errorf("abandonment-zoom does not show the latest alert (opened %s)", a.Alerts.Alerts[n-1].Opened)
		}
	}
}

func renderFixed(t *testing.T, a Answers) []byte {
	t.Helper()
	b, err := Render(Build(a, fixedSelection, []string{"last-touch", "linear", "shapley", "markov"}, "Lantern & Moss <live>"))
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// TestPageNumbersAreTheAnswers checks the page drawn from hand-written
// answers (see checkPage).
func TestPageNumbersAreTheAnswers(t *testing.T) {
	checkPage(t, renderFixed(t, fixedAnswers()), fixedAnswers())
}

// TestPageEscapesNames checks that names from the data and the title never
// become markup in the page and still show as text.
func TestPageEscapesNames(t *testing.T) {
	page := string(renderFixed(t, fixedAnswers()))
	if regexp.MustCompile(`(?i)<script`).MatchString(page) {
		t.Fatal("the page contains a <script element")
	}
	for _, want := range []string{
		"&lt;script&gt;alert(&#34;x&#34;)&lt;/script&gt;", // in SVG text (encoding/xml escaping)
		"<title>Lantern &amp; Moss &lt;live&gt;</title>",  // html/template escaping
	} {
		if !strings.Contains(page, want) {
			t.Errorf("page lacks %q", want)
		}
	}
}

// TestPageShowsErrorsAndSummaries checks the text around the charts: a
// failed model is named, each chart has its summary, the refresh is set and
// each table has the chart's numbers.
func TestPageShowsErrorsAndSummaries(t *testing.T) {
	page := string(renderFixed(t, fixedAnswers()))
	for _, want := range []string{
		`<meta http-equiv="refresh" content="30">`,
		"Some models could not be computed: markov: markov: solver gave up",
		"On 2026-10-03, &lt;script&gt;alert(&#34;x&#34;)&lt;/script&gt; received the most credit: 4 conversions (50% of the day&#39;s 8).",
		"The largest move since 2026-10-02: &lt;script&gt;alert(&#34;x&#34;)&lt;/script&gt; went from 25% to 50% of the day&#39;s credit.",
		"Journeys most often start with search_ads (60%).",
		"The models disagree most about",
		"The most common session is &#34;product_view&#34;: 60 sessions (60% of 100)",
		"100 sessions reached product_view; 7% of them went all the way to order. The biggest loss is after basket_add: 75% left before checkout.",
		"One alert in this window. The latest opened Oct 3 13:00 UTC and closed Oct 3 13:30 UTC",
		"<th scope=\"row\">2026-10-02</th><td>2.5</td><td>3</td><td>4.5</td>",
	} {
		if !strings.Contains(page, want) {
			t.Errorf("page lacks %q", want)
		}
	}
	if n := strings.Count(page, `<svg `); n != 7 {
		t.Errorf("%d charts, want 7", n)
	}
	if n := strings.Count(page, "<table>"); n != 7 {
		t.Errorf("%d tables, want 7", n)
	}
}

// TestPageChartErrorsStayLocal checks that a failed answer replaces its
// chart with the error and leaves the others drawn.
func TestPageChartErrorsStayLocal(t *testing.T) {
	a := fixedAnswers()
	a.FunnelErr = errors.New("funnel: disk on fire")
	page := string(renderFixed(t, a))
	if !strings.Contains(page, "This chart could not be computed: funnel: disk on fire") {
		t.Error("the funnel error is not shown")
	}
	if n := strings.Count(page, `<svg `); n != 6 {
		t.Errorf("%d charts, want 6 (all but the funnel)", n)
	}
}

// TestChannelsFold checks that beyond len(Palette) channels the ones with
// least credit are drawn as one "other" series whose values are their sums.
func TestChannelsFold(t *testing.T) {
	totals := map[string]float64{}
	day := query.ShiftDay{Day: "2026-10-01"}
	for i := range 10 {
		name := string(rune('a' + i))
		totals[name] = float64(10 - i) // a has the most credit
		day.Channels = append(day.Channels, query.ShiftCell{Channel: name, Conversions: float64(10 - i)})
	}
	ch := NewChannels(totals)
	if len(ch.Names) != len(Palette) || ch.Names[len(ch.Names)-1] != OtherChannel {
		t.Fatalf("names = %v, want %d kept then %s", ch.Names, len(Palette)-1, OtherChannel)
	}
	_, series := ShiftSeries(query.ShiftAnswer{Days: []query.ShiftDay{day}}, ch)
	var sum float64
	for _, s := range series {
		sum += s.Values[0]
	}
	if got, want := series[len(series)-1].Values[0], 3.0+2+1; got != want { // h, i, j
		t.Errorf("other = %v, want %v", got, want)
	}
	if sum != 55 {
		t.Errorf("sum over series = %v, want 55 (nothing lost)", sum)
	}
}

// TestZoom checks the close-up's window: the latest alert with zoomPad
// either side, or the last day without alerts.
func TestZoom(t *testing.T) {
	t0 := time.Date(2026, 10, 1, 0, 0, 0, 0, time.UTC)
	d := ControlData{Interval: time.Hour}
	for i := range 72 {
		d.Points = append(d.Points, ControlPoint{Start: t0.Add(time.Duration(i) * time.Hour), Sessions: 1})
	}
	tests := []struct {
		name       string
		alerts     []AlertBand
		first, end time.Time
		what       string
	}{
		{"no alert", nil, t0.Add(48 * time.Hour), t0.Add(71 * time.Hour), "the last day"},
		{"closed", []AlertBand{{Opened: t0.Add(10 * time.Hour), Closed: t0.Add(12 * time.Hour)}, {Opened: t0.Add(30 * time.Hour), Closed: t0.Add(31 * time.Hour)}},
			t0.Add(26 * time.Hour), t0.Add(34 * time.Hour), "the latest alert"},
		{"open", []AlertBand{{Opened: t0.Add(70 * time.Hour)}}, t0.Add(66 * time.Hour), t0.Add(71 * time.Hour), "the latest alert"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			d.Alerts = tt.alerts
			z, what := Zoom(d)
			if what != tt.what || !z.Points[0].Start.Equal(tt.first) || !z.Points[len(z.Points)-1].Start.Equal(tt.end) {
				t.Errorf("got %s from %s to %s, want %s from %s to %s", what, z.Points[0].Start, z.Points[len(z.Points)-1].Start, tt.what, tt.first, tt.end)
			}
			if len(tt.alerts) > 0 && len(z.Alerts) != 1 {
				t.Errorf("alerts in the close-up = %d, want 1", len(z.Alerts))
			}
		})
	}
}

// TestShiftSummaryEdges checks the daily chart's summary without days and
// when the latest day has no conversions yet.
func TestShiftSummaryEdges(t *testing.T) {
	a := fixedAnswers().Shift
	quiet := a
	quiet.Days = append(append([]query.ShiftDay{}, a.Days...), query.ShiftDay{Day: "2026-10-04",
		Channels: []query.ShiftCell{{Channel: "direct"}, {Channel: "search_ads"}}})
	tests := []struct {
		name string
		in   query.ShiftAnswer
		want string
	}{
		{"no days", query.ShiftAnswer{}, "No conversions were credited in these days."},
		{"quiet latest day", quiet, "No conversions were credited on 2026-10-04, the latest day."},
	}
	for _, tt := range tests {
		if got := shiftSummary(tt.in); got != tt.want {
			t.Errorf("%s: got %q, want %q", tt.name, got, tt.want)
		}
	}
}

// closedText is an alert's closing time as the page writes it ("" while open).
func closedText(t time.Time) string {
	if t.IsZero() {
		return ""
	}
	return query.FormatTime(t)
}

func ptr(x float64) *float64 { return &x }

// TestModelDotsWithTruth: with a truth file the model comparison uses the
// scorecard's shares over the simulated channels and draws the true share
// as a ring. Hand-computed from fixedAnswers' credit (the hostile channel
// and search_ads are the simulated ones, true effects 6 and 4 of 10):
// last-touch 0.5 and 0.3 renormalise to 0.625 and 0.375 (error
// |0.625−0.6| + |0.375−0.4| = 0.05), linear 1/3 and 1/2 to 0.4 and 0.6
// (error 0.4), shapley 1.1 and −0.1 stay (sum 1; error 1.0). Direct has no
// row.
func TestModelDotsWithTruth(t *testing.T) {
	a := fixedAnswers()
	evil := hostile[0]
	a.Truth = &query.Truth{IncrementalTotal: 10, Channels: map[string]float64{evil: 6, "search_ads": 4}}
	models, rows := ModelDots(a.Credit, NewChannels(creditTotals(a.Shift, a.Credit)), a.Truth)
	if strings.Join(models, ",") != "last-touch,linear,shapley" {
		t.Fatalf("models %q", models)
	}
	want := map[string][]float64{evil: {0.625, 0.4, 1.1, 0.6}, "search_ads": {0.375, 0.6, -0.1, 0.4}}
	if len(rows) != 2 {
		t.Fatalf("rows %+v, want the two simulated channels", rows)
	}
	for _, r := range rows {
		w := want[r.Name]
		if w == nil || !r.HasRef || math.Abs(r.Ref-w[3]) > 1e-12 {
			t.Errorf("row %+v, want ring at %v", r, w)
			continue
		}
		for m := range models {
			if math.Abs(r.Values[m]-w[m]) > 1e-12 {
				t.Errorf("%s %s = %v, want %v", r.Name, models[m], r.Values[m], w[m])
			}
		}
	}
	page, err := Render(Build(a, Selection{Model: "linear", Last: 30 * 24 * time.Hour, Days: 14}, []string{"linear", "last-touch", "shapley", "markov"}, "t"))
	if err != nil {
		t.Fatal(err)
	}
	charts := pageCharts(t, page)
	rings := charts["credit-models"].all(func(n *xnode) bool { return n.attr["class"] == "ref" })
	if len(rings) != 2 {
		t.Errorf("%d rings, want 2", len(rings))
	}
	if want := "Closest to the simulated truth: last-touch (Σ|share − true share| = 0.050)."; !strings.Contains(string(page), want) {
		t.Errorf("page lacks %q", want)
	}
}
