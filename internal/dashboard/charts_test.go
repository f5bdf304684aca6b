package dashboard

import (
	"math"
	"strconv"
	"strings"
	"testing"
	"time"
)

// Fixed inputs of the golden tests (invented for the tests).
var (
	goldenDays   = []string{"Oct 1", "Oct 2", "Oct 3", "Oct 4", "Oct 5"}
	goldenSeries = []Series{
		{Name: "search_ads", Values: []float64{12, 14.5, 9, 6.25, 5}},
		{Name: "social_ads", Values: []float64{3, 4, 8, 11.75, 13}},
		{Name: "direct", Values: []float64{7, math.NaN(), 6, 7, 8}},
	}
	goldenT0 = time.Date(2026, 10, 8, 12, 0, 0, 0, time.UTC)
)

func goldenControl() ControlData {
	d := ControlData{Interval: 15 * time.Minute}
	rates := []float64{0, 0.30, 0.32, 0.28, 0.31, 0.9, 1, 0.6, 0.3, 0.29, 0.33, 0.3}
	z := 0.3
	for i, r := range rates {
		p := ControlPoint{Start: goldenT0.Add(time.Duration(i) * 15 * time.Minute), Sessions: 10, Rate: r, Baseline: 0.3, Limit: 0.45}
		if i == 0 {
			p.Sessions = 0 // before the data: left off the axis
		} else {
			z = 0.2*r + 0.8*z
			p.Statistic, p.Evaluated = z, i > 1
		}
		d.Points = append(d.Points, p)
	}
	opened := goldenT0.Add(6 * 15 * time.Minute)
	closed := goldenT0.Add(8 * 15 * time.Minute)
	d.Alerts = []AlertBand{{Opened: opened, Closed: closed, Peak: 1, Limit: 0.45,
		OpenedText: opened.Format(time.RFC3339), ClosedText: closed.Format(time.RFC3339)}}
	return d
}

// goldenModels and goldenDots: three models, three channels; social_ads
// has no value from shapley (NaN) and a negative one would widen the axis.
var (
	goldenModels = []string{"first-touch", "last-touch", "markov (order 1)"}
	goldenDots   = []DotRow{
		{Name: "search_ads", Values: []float64{0.5, 0.25, 0.4}, HasRef: true, Ref: 0.45},
		{Name: "social_ads", Values: []float64{0.3, 0.25, math.NaN()}, HasRef: true, Ref: 0.2},
		{Name: "newsletter", Values: []float64{0.2, 0.5, 0.6}, HasRef: true, Ref: 0.35},
	}
)

// goldenNext: 1000 sessions; from @entry 900 go to product_view, 100 to
// basket_add; from product_view 400 of 1000 steps go to basket_add.
func goldenNext() ([]NextRow, []string) {
	cols := []string{"product_view", "basket_add", "@exit"}
	return []NextRow{
		{From: "@entry", Total: 1000, Cells: []NextCell{{Has: true, Count: 900, Share: 0.9}, {Has: true, Count: 100, Share: 0.1}, {}}},
		{From: "product_view", Total: 1000, Cells: []NextCell{{Has: true, Count: 100, Share: 0.1}, {Has: true, Count: 400, Share: 0.4}, {Has: true, Count: 500, Share: 0.5}}},
		{From: "basket_add", Total: 500, Cells: []NextCell{{Has: true, Count: 50, Share: 0.1}, {}, {Has: true, Count: 450, Share: 0.9}}},
	}, cols
}

// TestGoldenCharts pins the markup of every chart for fixed inputs. Review
// a change in a browser, then rewrite with -update.
func TestGoldenCharts(t *testing.T) {
	tests := []struct {
		file string
		svg  []byte
	}{
		{"line.svg", LineChart(goldenDays, goldenSeries, Frame{ID: "t-line", Title: "Credit per day", Desc: "Lines.", XLabel: "day (UTC)", YLabel: "conversions credited"})},
		{"line-empty.svg", LineChart(nil, nil, Frame{ID: "t-line-empty", Title: "Credit per day", Desc: "Lines."})},
		{"dots.svg", DotPlot(goldenModels, goldenDots, "simulated true share", Frame{ID: "t-dots", Title: "Models", Desc: "Dots.", XLabel: "share", Unit: Percent, Width: 640})},
		{"dots-noref.svg", DotPlot(goldenModels[:2], []DotRow{
			{Name: "search_ads", Values: []float64{0.5, 0.6}},
			{Name: "social_ads", Values: []float64{-0.1, 0.25}},
		}, "", Frame{ID: "t-dots-noref", Title: "Models", Desc: "Dots.", XLabel: "share", Unit: Percent, Width: 640})},
		{"heatmap.svg", Heatmap([]string{"@entry", "search_ads", "social_ads"}, []string{"search_ads", "social_ads", "@converted", "@lost"}, [][]HeatCell{
			{{Has: true, Value: 0.75, Count: 75}, {Has: true, Value: 0.25, Count: 25}, {}, {}},
			{{}, {Has: true, Value: 0.1, Count: 10}, {Has: true, Value: 0.3, Count: 30}, {Has: true, Value: 0.6, Count: 60}},
			{{Has: true, Value: 0.0004, Count: 1}, {}, {Has: true, Value: 0.05, Count: 5}, {Has: true, Value: 0.9496, Count: 2374}},
		}, Frame{ID: "t-heat", Title: "Transitions", Desc: "Heatmap.", XLabel: "row probability", Unit: Percent})},
		{"nextsteps.svg", func() []byte {
			rows, cols := goldenNext()
			return NextSteps(rows, cols, "@exit", Frame{ID: "t-next", Title: "Next steps", Desc: "Table of bars.", Width: 640})
		}()},
		{"funnel.svg", FunnelChart([]FunnelBar{
			{Step: "product_view", Sessions: 1000, Abandonment: 0.6},
			{Step: "basket_add", Sessions: 400, Abandonment: 0.5},
			{Step: "checkout", Sessions: 200, Abandonment: 0.25},
			{Step: "order", Sessions: 150},
		}, Frame{ID: "t-funnel", Title: "Funnel", Desc: "Bars.", XLabel: "sessions", Unit: Count})},
		{"control.svg", ControlChart(goldenControl(), Frame{ID: "t-control", Title: "Abandonment", Desc: "Control chart.", XLabel: "time (UTC)", YLabel: "rate", Width: 640})},
		{"control-empty.svg", ControlChart(ControlData{}, Frame{ID: "t-control-empty", Title: "Abandonment", Desc: "Control chart."})},
	}
	for _, tt := range tests {
		t.Run(tt.file, func(t *testing.T) {
			parseXML(t, tt.svg)
			golden(t, tt.file, tt.svg)
		})
	}
}

// hostile are channel names a publisher could send: markup, quotes,
// ampersands, control characters and invalid UTF-8.
var hostile = []string{
	`<script>alert("x")</script>`,
	`o'brien & "co" <b>`,
	"tab\there\x01\xff",
}

// TestChartsEscapeNames draws every chart with hostile names and checks
// that each SVG is well-formed XML, carries no live markup, and that the
// names come back as text in tooltips and data attributes.
func TestChartsEscapeNames(t *testing.T) {
	var series []Series
	for _, h := range hostile {
		series = append(series, Series{Name: h, Values: []float64{1, 2}})
	}
	cells := make([][]HeatCell, len(hostile))
	for i := range cells {
		cells[i] = make([]HeatCell, len(hostile))
		for j := range cells[i] {
			cells[i][j] = HeatCell{Has: true, Value: 0.5, Count: 2}
		}
	}
	var dots []DotRow
	var next []NextRow
	for _, h := range hostile {
		dots = append(dots, DotRow{Name: h, Values: []float64{0.2, 0.3}, HasRef: true, Ref: 0.25})
		next = append(next, NextRow{From: h, Total: 4, Cells: []NextCell{{Has: true, Count: 2, Share: 0.5}, {Has: true, Count: 2, Share: 0.5}}})
	}
	var steps []FunnelBar
	for _, h := range hostile {
		steps = append(steps, FunnelBar{Step: h, Sessions: 10, Abandonment: 0.5})
	}
	f := Frame{ID: `"><script>`, Title: hostile[0], Desc: hostile[1], XLabel: hostile[2], YLabel: hostile[0]}
	charts := map[string][]byte{
		"line":    LineChart([]string{hostile[0], hostile[1]}, series, f),
		"dots":    DotPlot([]string{hostile[0], hostile[1]}, dots, hostile[2], f),
		"heatmap": Heatmap(hostile, hostile, cells, f),
		"next":    NextSteps(next, []string{hostile[1], hostile[2]}, hostile[2], f),
		"funnel":  FunnelChart(steps, f),
		"control": ControlChart(goldenControl(), f),
	}
	for kind, svg := range charts {
		t.Run(kind, func(t *testing.T) {
			if strings.Contains(strings.ToLower(string(svg)), "<script") || strings.Contains(string(svg), "<b>") {
				t.Fatalf("raw markup from a name reached the SVG:\n%s", svg)
			}
			root := parseXML(t, svg)
			if got := root.title(); got != hostile[0] {
				t.Errorf("title = %q, want %q", got, hostile[0])
			}
			if id := root.attr["aria-labelledby"]; id != "script-title script-desc" {
				t.Errorf("aria-labelledby = %q, want the id reduced to safe characters", id)
			}
			if kind == "control" {
				return
			}
			// The first hostile name must come back intact from a data attribute.
			found := false
			for _, n := range root.all(func(*xnode) bool { return true }) {
				for _, k := range []string{"data-series", "data-row", "data-model", "data-step", "data-col"} {
					if n.attr[k] == hostile[0] {
						found = true
					}
				}
			}
			if !found {
				t.Errorf("no data attribute holds %q", hostile[0])
			}
		})
	}
}

// TestLineChartValues checks that each point carries its series' value and
// that a NaN value draws no point.
func TestLineChartValues(t *testing.T) {
	root := parseXML(t, LineChart(goldenDays, goldenSeries, Frame{ID: "v"}))
	points := root.all(withAttr("data-value"))
	got := map[[2]string]float64{}
	for _, p := range points {
		got[[2]string{p.attr["data-series"], p.attr["data-x"]}] = float(t, p.attr["data-value"])
	}
	want := 0
	for _, s := range goldenSeries {
		for i, v := range s.Values {
			if math.IsNaN(v) {
				if _, ok := got[[2]string{s.Name, goldenDays[i]}]; ok {
					t.Errorf("%s %s: NaN drew a point", s.Name, goldenDays[i])
				}
				continue
			}
			want++
			if g := got[[2]string{s.Name, goldenDays[i]}]; g != v {
				t.Errorf("%s %s = %v, want %v", s.Name, goldenDays[i], g, v)
			}
		}
	}
	if len(points) != want {
		t.Errorf("%d points, want %d", len(points), want)
	}
}

// TestControlChartValues checks the data-values of the lines: the rate of
// every interval with sessions from the first one with data, and the
// statistic and limit from the first evaluated interval on.
func TestControlChartValues(t *testing.T) {
	d := goldenControl()
	root := parseXML(t, ControlChart(d, Frame{ID: "c"}))
	lines := map[string]*xnode{}
	for _, n := range root.all(withAttr("data-values")) {
		lines[n.attr["class"]] = n
	}
	tests := []struct {
		class string
		first int
		value func(ControlPoint) float64
		keep  func(ControlPoint) bool
	}{
		{"rate", 1, func(p ControlPoint) float64 { return p.Rate }, func(p ControlPoint) bool { return p.Sessions > 0 }},
		{"statistic", 2, func(p ControlPoint) float64 { return p.Statistic }, func(ControlPoint) bool { return true }},
		{"limit", 2, func(p ControlPoint) float64 { return p.Limit }, func(ControlPoint) bool { return true }},
		{"baseline", 2, func(p ControlPoint) float64 { return p.Baseline }, func(ControlPoint) bool { return true }},
	}
	for _, tt := range tests {
		n := lines[tt.class]
		if n == nil {
			t.Errorf("no %s line", tt.class)
			continue
		}
		if got := n.attr["data-first"]; got != exactInt(int64(tt.first)) {
			t.Errorf("%s: data-first = %s, want %d", tt.class, got, tt.first)
		}
		var want []string
		for _, p := range d.Points[tt.first:] {
			if tt.keep(p) {
				want = append(want, exact(tt.value(p)))
			}
		}
		if got := n.attr["data-values"]; got != strings.Join(want, " ") {
			t.Errorf("%s: data-values = %q, want %q", tt.class, got, strings.Join(want, " "))
		}
	}
	bands := root.all(func(n *xnode) bool { return n.attr["class"] == "alert-band" })
	if len(bands) != 1 || bands[0].attr["data-opened"] != d.Alerts[0].OpenedText || bands[0].attr["data-closed"] != d.Alerts[0].ClosedText {
		t.Errorf("alert bands = %d, want one from %s to %s", len(bands), d.Alerts[0].OpenedText, d.Alerts[0].ClosedText)
	}
}

// TestDotPlotValues checks that every model value is one mark carrying it
// (NaN draws none), that each row's spread bar runs from its smallest to its
// largest value and that each reference is a ring with its value.
func TestDotPlotValues(t *testing.T) {
	root := parseXML(t, DotPlot(goldenModels, goldenDots, "truth", Frame{ID: "d", Unit: Percent}))
	got := map[[2]string]float64{}
	marks := root.all(func(n *xnode) bool { return n.attr["class"] == "mark" })
	for _, n := range marks {
		got[[2]string{n.attr["data-row"], n.attr["data-model"]}] = float(t, n.attr["data-value"])
	}
	want := 0
	for _, r := range goldenDots {
		lo, hi := math.Inf(1), math.Inf(-1)
		for m, v := range r.Values {
			k := [2]string{r.Name, goldenModels[m]}
			if math.IsNaN(v) {
				if _, ok := got[k]; ok {
					t.Errorf("%v: NaN drew a mark", k)
				}
				continue
			}
			want++
			lo, hi = math.Min(lo, v), math.Max(hi, v)
			if got[k] != v {
				t.Errorf("%v = %v, want %v", k, got[k], v)
			}
		}
		spread := root.all(func(n *xnode) bool { return n.attr["class"] == "spread" && n.attr["data-row"] == r.Name })
		if len(spread) != 1 || float(t, spread[0].attr["data-min"]) != lo || float(t, spread[0].attr["data-max"]) != hi {
			t.Errorf("%s: spread %v, want one from %v to %v", r.Name, spread, lo, hi)
		}
		rings := root.all(func(n *xnode) bool { return n.attr["class"] == "ref" && n.attr["data-row"] == r.Name })
		if len(rings) != 1 || float(t, rings[0].attr["data-value"]) != r.Ref || rings[0].attr["fill"] != "none" {
			t.Errorf("%s: rings %v, want one hollow ring at %v", r.Name, rings, r.Ref)
		}
	}
	if len(marks) != want {
		t.Errorf("%d marks, want %d", len(marks), want)
	}
	// Each model keeps one colour and one shape on every row.
	for m, name := range goldenModels {
		colors, shapes := map[string]bool{}, map[int]bool{}
		for _, n := range marks {
			if n.attr["data-model"] == name {
				colors[n.attr["fill"]] = true
				shapes[strings.Count(n.attr["d"], "L")] = true
			}
		}
		if len(colors) != 1 || !colors[modelColor(m)] || len(shapes) != 1 {
			t.Errorf("%s: colours %v shapes %v, want only %s and one shape", name, colors, shapes, modelColor(m))
		}
	}
}

// TestNextStepsValues checks that each observed cell carries its share and
// count, cells without sessions draw no bar, rows carry their totals and
// the bar ending the session has its own colour.
func TestNextStepsValues(t *testing.T) {
	rows, cols := goldenNext()
	root := parseXML(t, NextSteps(rows, cols, "@exit", Frame{ID: "n"}))
	cells := root.all(func(n *xnode) bool { return n.attr["class"] == "cell" })
	want := 0
	for _, r := range rows {
		rowNodes := root.all(func(n *xnode) bool { return n.attr["class"] == "row" && n.attr["data-row"] == r.From })
		if len(rowNodes) != 1 || rowNodes[0].attr["data-value"] != exactInt(r.Total) {
			t.Errorf("row %s: %v, want one with total %d", r.From, rowNodes, r.Total)
		}
		for j, c := range r.Cells {
			found := root.all(func(n *xnode) bool {
				return n.attr["class"] == "cell" && n.attr["data-row"] == r.From && n.attr["data-col"] == cols[j]
			})
			if !c.Has {
				if len(found) != 0 {
					t.Errorf("%s → %s: drawn without sessions", r.From, cols[j])
				}
				continue
			}
			want++
			if len(found) != 1 || float(t, found[0].attr["data-value"]) != c.Share || found[0].attr["data-count"] != exactInt(c.Count) {
				t.Errorf("%s → %s: %v, want share %v count %d", r.From, cols[j], found, c.Share, c.Count)
				continue
			}
			bar := found[0].all(func(n *xnode) bool { return n.attr["class"] == "bar" })
			wantColor := colorNext
			if cols[j] == "@exit" {
				wantColor = colorExit
			}
			if len(bar) != 1 || bar[0].attr["fill"] != wantColor {
				t.Errorf("%s → %s: bar %v, want one in %s", r.From, cols[j], bar, wantColor)
			}
		}
	}
	if len(cells) != want {
		t.Errorf("%d cells, want %d", len(cells), want)
	}
	// The tooltip of @entry → product_view quotes the row share and count.
	for _, n := range cells {
		if n.attr["data-row"] == "@entry" && n.attr["data-col"] == "product_view" && !strings.Contains(n.title(), "90%") {
			t.Errorf("@entry → product_view tooltip %q lacks the share 90%%", n.title())
		}
	}
}

// TestEmptyChartsSayNoData checks that a chart without data still is a
// valid SVG with its title and a visible message, and carries no values.
func TestEmptyChartsSayNoData(t *testing.T) {
	f := Frame{ID: "e", Title: "Empty"}
	for kind, svg := range map[string][]byte{
		"line":    LineChart(nil, nil, f),
		"dots":    DotPlot(nil, nil, "", f),
		"heatmap": Heatmap(nil, nil, nil, f),
		"next":    NextSteps(nil, nil, "@exit", f),
		"funnel":  FunnelChart(nil, f),
		"control": ControlChart(ControlData{}, f),
	} {
		root := parseXML(t, svg)
		if n := len(root.all(withAttr("data-value"))) + len(root.all(withAttr("data-values"))); n != 0 {
			t.Errorf("%s: %d values in an empty chart", kind, n)
		}
		if len(root.all(func(n *xnode) bool { return n.attr["class"] == "no-data" })) != 1 {
			t.Errorf("%s: no message in an empty chart", kind)
		}
	}
}

// TestDotPlotOffScale: a share beyond 100 % (a model with negative credit
// elsewhere) keeps its exact data-value, sits at the axis' right end and
// says "off scale"; the other marks keep an axis that ends at 100 %.
func TestDotPlotOffScale(t *testing.T) {
	root := parseXML(t, DotPlot([]string{"linear", "shapley"}, []DotRow{
		{Name: "coupon_partners", Values: []float64{0.2, 1.6}},
		{Name: "social_ads", Values: []float64{0.8, -0.6}},
	}, "", Frame{ID: "o", Unit: Percent}))
	var maxTick float64
	for _, n := range root.all(func(n *xnode) bool { return n.name == "text" && strings.HasSuffix(n.text, "%") }) {
		if v, err := strconv.ParseFloat(strings.TrimSuffix(n.text, "%"), 64); err == nil {
			maxTick = math.Max(maxTick, v)
		}
	}
	if maxTick != 100 {
		t.Errorf("largest axis label %v%%, want 100%%", maxTick)
	}
	off := root.all(func(n *xnode) bool { return n.attr["class"] == "off-scale" })
	if len(off) != 2 || !strings.Contains(off[0].text, "160%") || !strings.Contains(off[1].text, "-60%") {
		t.Errorf("off-scale labels %v, want 160%% and -60%%", off)
	}
	for _, n := range root.all(func(n *xnode) bool { return n.attr["class"] == "mark" && n.attr["data-model"] == "shapley" }) {
		if v := float(t, n.attr["data-value"]); v != 1.6 && v != -0.6 {
			t.Errorf("shapley mark value %v, want the exact 1.6 or -0.6", v)
		}
	}
}
