package dashboard

import "math"

// DotRow is one row of a dot plot: a category (a channel) with one value per
// model and, when known, a reference value (the simulated true share).
type DotRow struct {
	Name   string
	Values []float64 // one per model, in the models' order; NaN: the model gave none
	Tips   []string  // one tooltip per value; empty takes "model · row: value"
	HasRef bool
	Ref    float64 // the reference value, when HasRef
}

// markShapes are the mark shapes of the dot plot's models, in model order,
// so that a model is told apart by shape as well as by colour.
var markShapes = []string{"circle", "square", "diamond", "triangle-up", "triangle-down", "plus", "star", "hexagon"}

// markPath returns the SVG path of shape centred on (cx, cy) with radius r
// (the circle is drawn as a path too, so every mark is one element).
func markPath(shape string, cx, cy, r float64) string {
	poly := func(n int, r0, r1, phase float64) string {
		s := ""
		k := n
		if r1 > 0 {
			k = 2 * n
		}
		for i := 0; i < k; i++ {
			rr := r0
			if r1 > 0 && i%2 == 1 {
				rr = r1
			}
			a := phase + 2*math.Pi*float64(i)/float64(k)
			cmd := "L"
			if i == 0 {
				cmd = "M"
			}
			s += cmd + num(cx+rr*math.Sin(a)) + " " + num(cy-rr*math.Cos(a)) + " "
		}
		return s + "Z"
	}
	switch shape {
	case "square":
		return poly(4, r*1.2, 0, math.Pi/4)
	case "diamond":
		return poly(4, r*1.3, 0, 0)
	case "triangle-up":
		return poly(3, r*1.35, 0, 0)
	case "triangle-down":
		return poly(3, r*1.35, 0, math.Pi)
	case "plus":
		a, b := r*1.2, r*0.42
		pts := [][2]float64{{-b, -a}, {b, -a}, {b, -b}, {a, -b}, {a, b}, {b, b}, {b, a}, {-b, a}, {-b, b}, {-a, b}, {-a, -b}, {-b, -b}}
		s := ""
		for i, p := range pts {
			cmd := "L"
			if i == 0 {
				cmd = "M"
			}
			s += cmd + num(cx+p[0]) + " " + num(cy+p[1]) + " "
		}
		return s + "Z"
	case "star":
		return poly(5, r*1.4, r*0.6, 0)
	case "hexagon":
		return poly(6, r*1.15, 0, 0)
	}
	// circle: two arcs
	return "M" + num(cx-r) + " " + num(cy) + " a" + num(r) + " " + num(r) + " 0 1 0 " + num(2*r) + " 0 a" + num(r) + " " + num(r) + " 0 1 0 " + num(-2*r) + " 0 Z"
}

// DotPlot compares models category by category: one row per category (a
// channel), a shared value axis across, and on each row one mark per model,
// each model with its own colour and shape (markShapes). A thin bar joins
// the row's smallest and largest value, so the spread between the models
// reads at a glance. When a row has a reference value (the simulated true
// share) it is drawn as a ring on the row's centre line. Within a row the
// models' marks sit on slightly offset lanes so equal values stay visible.
//
// With Unit Percent the axis spans at most −25 % to 100 %; a value beyond
// is drawn at the edge with its value written beside it ("off scale").
//
// Marks carry data-row, data-model and data-value; rings carry class "ref",
// data-row and data-value; spread bars data-row, data-min and data-max.
// refLabel names the ring in the legend. Default width 960; the height
// follows the rows.
func DotPlot(models []string, rows []DotRow, refLabel string, f Frame) []byte {
	width, _ := f.size(960, 0)
	longest := 0.0
	for _, r := range rows {
		longest = math.Max(longest, textWidth(clip(r.Name, 22), 12))
	}
	left := math.Min(longest, 170) + 20
	const right, rowH, bottom = 24.0, 38.0, 48.0
	items := make([]legendItem, 0, len(models)+1)
	for i, m := range models {
		items = append(items, legendItem{label: m, color: modelColor(i), marker: "shape", shape: markShapes[i%len(markShapes)]})
	}
	hasRef := false
	for _, r := range rows {
		hasRef = hasRef || r.HasRef
	}
	if hasRef {
		items = append(items, legendItem{label: refLabel, color: colorText, marker: "ring"})
	}
	top := 10 + legendHeight(items, left, width-right) + 18
	height := top + float64(len(rows))*rowH + bottom
	var w svgWriter
	w.root("dots", f, width, height)
	lo, hi, any := math.Inf(1), math.Inf(-1), false
	for _, r := range rows {
		vals := r.Values
		if r.HasRef {
			vals = append(append([]float64{}, vals...), r.Ref)
		}
		for _, v := range vals {
			if !math.IsNaN(v) && !math.IsInf(v, 0) {
				lo, hi, any = math.Min(lo, v), math.Max(hi, v), true
			}
		}
	}
	if !any || len(models) == 0 {
		w.noData(width/2, height/2, "No credited conversions in this window yet")
		return w.bytes()
	}
	w.legend(items, left, width-right, 8)
	// Shares are drawn on [−25 %, 100 %] at most: a model whose shares leave
	// that range (negative credit elsewhere inflates the rest) would squeeze
	// every other mark together. Such a mark sits at the edge, in its shape,
	// with its value printed beside it (class "off-scale"); its data-value
	// stays exact.
	vlo, vhi := math.Min(0, lo), math.Max(0, hi)
	if f.Unit == Percent {
		vlo, vhi = math.Max(vlo, -0.25), math.Min(vhi, 1)
	}
	xs := niceScale(vlo, vhi, 7, left, width-right)
	xAt := func(v float64) (float64, bool) {
		if v < xs.lo {
			return xs.at(xs.lo), true
		}
		if v > xs.hi {
			return xs.at(xs.hi), true
		}
		return xs.at(v), false
	}
	plotBottom := top + float64(len(rows))*rowH
	w.open("g", "class", "axis axis-x")
	for _, t := range xs.ticks {
		x := xs.at(t)
		stroke := colorGrid
		if t == 0 {
			stroke = colorAxis
		}
		w.empty("line", "x1", num(x), "y1", num(top-4), "x2", num(x), "y2", num(plotBottom), "stroke", stroke, "stroke-width", "1")
		w.elem("text", f.Unit.tick(t, xs.step), "x", num(x), "y", num(plotBottom+16), "text-anchor", "middle", "fill", colorMuted)
	}
	w.close("g")
	w.axisTitle(f.XLabel, left, width-right, height-12)
	lane := math.Min(3.4, (rowH-14)/math.Max(float64(len(models)-1), 1))
	for i, r := range rows {
		mid := top + (float64(i)+0.5)*rowH
		w.open("g", "class", "row", "data-row", r.Name)
		if i%2 == 0 {
			w.empty("rect", "class", "row-band", "x", num(left), "y", num(mid-rowH/2), "width", num(width-right-left), "height", num(rowH), "fill", colorBand)
		}
		w.open("text", "x", num(left-10), "y", num(mid+4), "text-anchor", "end", "fill", colorText)
		w.elem("title", r.Name)
		w.escape(clip(r.Name, 22))
		w.close("text")
		rlo, rhi, rany := math.Inf(1), math.Inf(-1), false
		for _, v := range r.Values {
			if !math.IsNaN(v) && !math.IsInf(v, 0) {
				rlo, rhi, rany = math.Min(rlo, v), math.Max(rhi, v), true
			}
		}
		if rany {
			x0, _ := xAt(rlo)
			x1, _ := xAt(rhi)
			w.empty("rect", "class", "spread", "x", num(x0), "y", num(mid-1.5), "width", num(math.Max(x1-x0, 0.5)), "height", "3",
				"fill", colorSpread, "data-row", r.Name, "data-min", exact(rlo), "data-max", exact(rhi))
		}
		if r.HasRef {
			x, _ := xAt(r.Ref)
			w.tip("circle", refLabel+" · "+r.Name+": "+f.Unit.format(r.Ref), "class", "ref", "cx", num(x), "cy", num(mid), "r", "9",
				"fill", "none", "stroke", colorText, "stroke-width", "2.2", "data-row", r.Name, "data-value", exact(r.Ref))
		}
		for m, v := range r.Values {
			if m >= len(models) || math.IsNaN(v) || math.IsInf(v, 0) {
				continue
			}
			tip := models[m] + " · " + r.Name + ": " + f.Unit.format(v)
			if m < len(r.Tips) && r.Tips[m] != "" {
				tip = r.Tips[m]
			}
			y := mid + (float64(m)-float64(len(models)-1)/2)*lane
			x, off := xAt(v)
			w.tip("path", tip, "class", "mark", "d", markPath(markShapes[m%len(markShapes)], x, y, 4.5),
				"fill", modelColor(m), "stroke", colorBackground, "stroke-width", "0.8",
				"data-row", r.Name, "data-model", models[m], "data-value", exact(v))
			if off {
				anchor, dx := "end", -8.0
				if v < xs.lo {
					anchor, dx = "start", 8
				}
				w.elem("text", clip(models[m], 16)+" "+f.Unit.format(v)+" (off scale)", "class", "off-scale", "x", num(x+dx), "y", num(y+4),
					"text-anchor", anchor, "fill", modelColor(m), "font-size", "11")
			}
		}
		w.close("g")
	}
	return w.bytes()
}

// modelColor is the colour of the i-th model's marks: the palette, with its
// weakest colour on white (yellow) replaced by a dark grey so that a small
// mark stays visible.
func modelColor(i int) string {
	c := Palette[i%len(Palette)]
	if c == "#F0E442" {
		return "#6b6b6b"
	}
	return c
}
