package dashboard

import (
	"math"
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

func goldenFlow() FlowData {
	return FlowData{
		Sessions: 1000, Start: "@entry", End: "@exit",
		Paths: []FlowPath{
			{Steps: []string{"product_view"}, Count: 500},
			{Steps: []string{"product_view", "basket_add"}, Count: 200},
			{Steps: []string{"product_view", "basket_add", "checkout", "order"}, Count: 120, Conversions: 120},
			{Steps: []string{"basket_add", "product_view"}, Count: 40},
		},
		Next: []FlowLink{
			{From: "@entry", To: "product_view", Count: 900, Probability: 0.9},
			{From: "@entry", To: "basket_add", Count: 100, Probability: 0.1},
			{From: "product_view", To: "basket_add", Count: 400, Probability: 0.4},
		},
	}
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
		{"bars.svg", GroupedBars([]string{"first-touch", "last-touch", "shapley"}, []Series{
			{Name: "search_ads", Values: []float64{0.5, 0.25, 0.6}},
			{Name: "social_ads", Values: []float64{0.3, 0.25, -0.1}},
			{Name: "direct", Values: []float64{0.2, 0.5, 0.5}},
		}, Frame{ID: "t-bars", Title: "Models", Desc: "Bars.", XLabel: "attribution model", YLabel: "share", Unit: Percent, Width: 640})},
		{"heatmap.svg", Heatmap([]string{"@entry", "search_ads", "social_ads"}, []string{"search_ads", "social_ads", "@converted", "@lost"}, [][]HeatCell{
			{{Has: true, Value: 0.75, Count: 75}, {Has: true, Value: 0.25, Count: 25}, {}, {}},
			{{}, {Has: true, Value: 0.1, Count: 10}, {Has: true, Value: 0.3, Count: 30}, {Has: true, Value: 0.6, Count: 60}},
			{{Has: true, Value: 0.0004, Count: 1}, {}, {Has: true, Value: 0.05, Count: 5}, {Has: true, Value: 0.9496, Count: 2374}},
		}, Frame{ID: "t-heat", Title: "Transitions", Desc: "Heatmap.", XLabel: "row probability", Unit: Percent})},
		{"flow.svg", Flow(goldenFlow(), Frame{ID: "t-flow", Title: "Flow", Desc: "Flow.", Width: 960, Height: 360})},
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
	var paths []FlowPath
	for _, h := range hostile {
		paths = append(paths, FlowPath{Steps: []string{h, "product_view"}, Count: 3})
	}
	var steps []FunnelBar
	for _, h := range hostile {
		steps = append(steps, FunnelBar{Step: h, Sessions: 10, Abandonment: 0.5})
	}
	f := Frame{ID: `"><script>`, Title: hostile[0], Desc: hostile[1], XLabel: hostile[2], YLabel: hostile[0]}
	charts := map[string][]byte{
		"line":    LineChart([]string{hostile[0], hostile[1]}, series, f),
		"bars":    GroupedBars([]string{hostile[0], hostile[1]}, series, f),
		"heatmap": Heatmap(hostile, hostile, cells, f),
		"flow":    Flow(FlowData{Sessions: 10, Paths: paths, Start: "@entry", End: "@exit"}, f),
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
				for _, k := range []string{"data-series", "data-row", "data-node", "data-step", "data-from"} {
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

// TestFlowLinksSumPaths checks that every link's width value is the sum of
// the paths through it, and every node's value the sum of the paths that
// reach it, computed here from the paths alone.
func TestFlowLinksSumPaths(t *testing.T) {
	d := goldenFlow()
	root := parseXML(t, Flow(d, Frame{ID: "f"}))
	wantLinks := map[string]int64{}
	wantNodes := map[string]int64{}
	for _, p := range d.Paths {
		states := append(append([]string{"@entry"}, p.Steps...), "@exit")
		for i, s := range states {
			wantNodes[exactInt(int64(i))+"|"+s] += p.Count
			if i > 0 {
				wantLinks[exactInt(int64(i-1))+"|"+states[i-1]+"|"+s] += p.Count
			}
		}
	}
	gotLinks := map[string]int64{}
	for _, n := range root.all(func(n *xnode) bool { return n.attr["class"] == "link" }) {
		gotLinks[n.attr["data-step"]+"|"+n.attr["data-from"]+"|"+n.attr["data-to"]] = int64(float(t, n.attr["data-value"]))
	}
	gotNodes := map[string]int64{}
	for _, n := range root.all(func(n *xnode) bool { return n.attr["class"] == "node" }) {
		gotNodes[n.attr["data-step"]+"|"+n.attr["data-node"]] = int64(float(t, n.attr["data-value"]))
	}
	for _, c := range []struct {
		what      string
		got, want map[string]int64
	}{{"links", gotLinks, wantLinks}, {"nodes", gotNodes, wantNodes}} {
		if len(c.got) != len(c.want) {
			t.Errorf("%s: %d drawn, want %d", c.what, len(c.got), len(c.want))
		}
		for k, w := range c.want {
			if c.got[k] != w {
				t.Errorf("%s %s = %d, want %d", c.what, k, c.got[k], w)
			}
		}
	}
	// The tooltip of @entry → product_view quotes the all-session probability.
	for _, n := range root.all(func(n *xnode) bool {
		return n.attr["class"] == "link" && n.attr["data-from"] == "@entry" && n.attr["data-to"] == "product_view"
	}) {
		if !strings.Contains(n.title(), "90%") {
			t.Errorf("@entry → product_view tooltip %q lacks the probability 90%%", n.title())
		}
	}
}

// TestEmptyChartsSayNoData checks that a chart without data still is a
// valid SVG with its title and a visible message, and carries no values.
func TestEmptyChartsSayNoData(t *testing.T) {
	f := Frame{ID: "e", Title: "Empty"}
	for kind, svg := range map[string][]byte{
		"line":    LineChart(nil, nil, f),
		"bars":    GroupedBars(nil, nil, f),
		"heatmap": Heatmap(nil, nil, nil, f),
		"flow":    Flow(FlowData{}, f),
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
