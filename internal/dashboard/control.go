package dashboard

import (
	"math"
	"strconv"
	"strings"
	"time"
)

// ControlPoint is one interval of a control chart.
type ControlPoint struct {
	Start     time.Time
	Sessions  int64
	Rate      float64 // abandonment rate of the interval (0 when Sessions is 0)
	Statistic float64 // EWMA statistic (carried through unevaluated intervals)
	Limit     float64 // upper control limit
	Baseline  float64 // in-control rate
	Evaluated bool
}

// AlertBand is one alert period.
type AlertBand struct {
	Opened, Closed time.Time // Closed zero: still open (the band runs to the chart's end)
	Peak, Limit    float64
	// Opened and closed as the answer wrote them, for data attributes.
	OpenedText, ClosedText string
}

// ControlData is what ControlChart draws.
type ControlData struct {
	Interval time.Duration
	Points   []ControlPoint // in time order, Interval apart
	Alerts   []AlertBand
}

// minBand is the narrowest an alert band is drawn, in pixels.
const minBand = 6.0

// ControlChart draws an abandonment control chart over time: the rate per
// interval (thin line, broken where an interval had no sessions), the EWMA
// statistic (thick line) and the upper control limit (dashed) from the first
// evaluated interval on, the baseline (dotted), and alert periods as shaded
// bands with a marker above them (at least minBand wide). Leading intervals
// with no sessions and no evaluation are left off the time axis. The lines carry their plotted values in order in data-values
// (space-separated, exact) and the index of their first point in
// data-first; bands carry data-opened and data-closed. Times are UTC.
// Default size 1280×320.
func ControlChart(d ControlData, f Frame) []byte {
	width, height := f.size(1280, 320)
	var w svgWriter
	w.root("control", f, width, height)
	const left, right, bottom = 64.0, 20.0, 50.0
	if len(d.Points) == 0 || d.Interval <= 0 {
		w.noData(width/2, height/2, "No sessions reached the watched step in this window yet")
		return w.bytes()
	}
	items := []legendItem{
		{label: "rate per " + shortDuration(d.Interval), color: colorRate, marker: "line"},
		{label: "EWMA statistic", color: colorStatistic, marker: "line"},
		{label: "upper control limit", color: colorLimit, dash: "6 4", marker: "line"},
		{label: "baseline", color: colorMuted, dash: "2 3", marker: "line"},
		{label: "alert open", color: colorAlert, marker: "band"},
	}
	// Leading intervals with neither sessions nor an evaluation (before the
	// data began) are left out of the time axis.
	lead := 0
	for lead < len(d.Points)-1 && d.Points[lead].Sessions == 0 && !d.Points[lead].Evaluated {
		lead++
	}
	top := 10 + w.legend(items, left, width-right, 8) + 14
	from := d.Points[lead].Start
	to := d.Points[len(d.Points)-1].Start.Add(d.Interval)
	span := to.Sub(from).Seconds()
	xAt := func(t time.Time) float64 {
		return left + t.Sub(from).Seconds()/span*(width-left-right)
	}
	firstEval := -1
	hi := 0.0
	for i, p := range d.Points[lead:] {
		i += lead
		if p.Sessions > 0 {
			hi = math.Max(hi, p.Rate)
		}
		if p.Evaluated && firstEval < 0 {
			firstEval = i
		}
		if firstEval >= 0 {
			hi = math.Max(hi, math.Max(p.Statistic, p.Limit))
		}
	}
	ys := niceScale(0, hi, 6, height-bottom, top)
	// Bands under everything.
	w.open("g", "class", "alerts")
	for _, a := range d.Alerts {
		x0 := math.Max(xAt(a.Opened), left)
		end := a.Closed
		if end.IsZero() || end.After(to) {
			end = to
		}
		x1 := math.Min(xAt(end), width-right)
		if x1-x0 < minBand { // keep a short alert visible on a long window
			c := (x0 + x1) / 2
			x0, x1 = math.Max(c-minBand/2, left), math.Min(c+minBand/2, width-right)
		}
		tip := "alert opened " + a.Opened.UTC().Format("Jan 2 15:04") + " UTC"
		if a.Closed.IsZero() {
			tip += ", still open"
		} else {
			tip += ", closed " + a.Closed.UTC().Format("Jan 2 15:04") + " UTC"
		}
		tip += "; peak rate " + Percent.format(a.Peak) + " against a limit of " + Percent.format(a.Limit)
		w.open("g", "class", "alert-band", "data-opened", a.OpenedText, "data-closed", a.ClosedText)
		w.elem("title", tip)
		w.empty("rect", "x", num(x0), "y", num(top), "width", num(x1-x0), "height", num(height-bottom-top),
			"fill", colorAlert, "fill-opacity", "0.18")
		// A marker above the band finds it on a long window.
		c := (x0 + x1) / 2
		w.empty("path", "d", "M"+num(c-6)+" "+num(top-9)+" L"+num(c+6)+" "+num(top-9)+" L"+num(c)+" "+num(top-1)+" Z", "fill", colorAlert)
		w.close("g")
	}
	w.close("g")
	w.valueAxis(ys, Percent, left, width-right, f.YLabel)
	ticks, step := timeTicks(from, to, int((width-left-right)/90))
	w.open("g", "class", "axis axis-x")
	for _, t := range ticks {
		x := xAt(t)
		w.empty("line", "x1", num(x), "y1", num(height-bottom), "x2", num(x), "y2", num(height-bottom+5), "stroke", colorAxis)
		w.elem("text", timeLabel(t, step), "x", num(x), "y", num(height-bottom+18), "text-anchor", "middle", "fill", colorMuted)
	}
	w.close("g")
	w.axisTitle(f.XLabel, left, width-right, height-10)
	mid := func(p ControlPoint) float64 { return xAt(p.Start.Add(d.Interval / 2)) }
	// line draws the points from first on with value v, breaking where keep
	// is false, and records the drawn values.
	line := func(class, color, strokeW, dash, opacity string, first int, v func(ControlPoint) float64, keep func(ControlPoint) bool) {
		if first < 0 {
			return
		}
		var path, vals strings.Builder
		pen := false
		for _, p := range d.Points[first:] {
			if !keep(p) {
				pen = false
				continue
			}
			if pen {
				path.WriteString(" L")
			} else {
				if path.Len() > 0 {
					path.WriteByte(' ')
				}
				path.WriteByte('M')
			}
			path.WriteString(num(mid(p)) + " " + num(ys.at(v(p))))
			if vals.Len() > 0 {
				vals.WriteByte(' ')
			}
			vals.WriteString(exact(v(p)))
			pen = true
		}
		kv := []string{"class", class, "d", path.String(), "fill", "none", "stroke", color, "stroke-width", strokeW,
			"stroke-linejoin", "round", "data-first", strconv.Itoa(first), "data-values", vals.String()}
		if dash != "" {
			kv = append(kv, "stroke-dasharray", dash)
		}
		if opacity != "" {
			kv = append(kv, "stroke-opacity", opacity)
		}
		w.empty("path", kv...)
	}
	all := func(ControlPoint) bool { return true }
	line("rate", colorRate, "1", "", "0.6", lead, func(p ControlPoint) float64 { return p.Rate }, func(p ControlPoint) bool { return p.Sessions > 0 })
	line("baseline", colorMuted, "1.2", "2 3", "", firstEval, func(p ControlPoint) float64 { return p.Baseline }, all)
	line("limit", colorLimit, "1.8", "6 4", "", firstEval, func(p ControlPoint) float64 { return p.Limit }, all)
	line("statistic", colorStatistic, "2.5", "", "", firstEval, func(p ControlPoint) float64 { return p.Statistic }, all)
	if firstEval < 0 {
		w.elem("text", "Not enough sessions per interval yet to evaluate the chart", "class", "note",
			"x", num((left+width-right)/2), "y", num(top+16), "text-anchor", "middle", "fill", colorMuted)
	}
	return w.bytes()
}

// shortDuration writes 5m, 1h, 1h30m, 1d.
func shortDuration(d time.Duration) string {
	if d%(24*time.Hour) == 0 {
		return strconv.FormatInt(int64(d/(24*time.Hour)), 10) + "d"
	}
	s := d.String()
	if strings.HasSuffix(s, "m0s") {
		s = strings.TrimSuffix(s, "0s")
	}
	if strings.HasSuffix(s, "h0m") {
		s = strings.TrimSuffix(s, "0m")
	}
	return s
}
