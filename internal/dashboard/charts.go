package dashboard

import (
	"math"
	"strings"
)

// Frame is what every chart has: its identity, its words and its size.
type Frame struct {
	// ID prefixes the chart's element ids; it must be unique on a page. Only
	// a-z, 0-9 and '-' are kept.
	ID string
	// Title is the chart's accessible name (the SVG <title>).
	Title string
	// Desc is its description for screen readers (the SVG <desc>): what is
	// drawn, in a sentence or two.
	Desc string
	// XLabel and YLabel title the axes, with their units.
	XLabel, YLabel string
	// Unit is how values are shown on the value axis and in tooltips.
	Unit Unit
	// Width and Height are the viewBox size in CSS pixels; 0 takes the
	// chart's default (and charts whose height follows their rows ignore
	// Height).
	Width, Height float64
}

func (f Frame) id() string { return safeID(f.ID) }

func (f Frame) size(w, h float64) (float64, float64) {
	if f.Width > 0 {
		w = f.Width
	}
	if f.Height > 0 {
		h = f.Height
	}
	return w, h
}

// Series is one named line or one colour of bars.
type Series struct {
	Name string
	// Color is a CSS colour; empty takes the palette's colour for the
	// series' position.
	Color string
	// Values has one value per x position (lines) or group (bars); NaN
	// means no value there.
	Values []float64
	// Tips, when set, has one tooltip per value replacing the default
	// "name, x: value".
	Tips []string
}

func (s Series) tip(i int, x string, u Unit) string {
	if i < len(s.Tips) && s.Tips[i] != "" {
		return s.Tips[i]
	}
	return s.Name + ", " + x + ": " + u.format(s.Values[i])
}

// legendItem is one entry of a legend.
type legendItem struct {
	label  string
	color  string
	dash   string
	marker string // "line", "box", "band", "shape" (a dot plot mark) or "ring"
	shape  string // marker "shape": one of markShapes
}

// legend lays items out in rows within [x0, x1] from y and returns the
// height used.
func (w *svgWriter) legend(items []legendItem, x0, x1, y float64) float64 {
	if len(items) == 0 {
		return 0
	}
	const rowH, swatch, pad = 18.0, 16.0, 18.0
	w.open("g", "class", "legend")
	x, row := x0, 0
	for _, it := range items {
		iw := swatch + 5 + textWidth(it.label, 12) + pad
		if x > x0 && x+iw > x1 {
			x = x0
			row++
		}
		cy := y + float64(row)*rowH + rowH/2
		w.open("g", "class", "legend-item")
		switch it.marker {
		case "line":
			kv := []string{"x1", num(x), "y1", num(cy), "x2", num(x + swatch), "y2", num(cy), "stroke", it.color, "stroke-width", "3"}
			if it.dash != "" {
				kv = append(kv, "stroke-dasharray", it.dash)
			}
			w.empty("line", kv...)
		case "shape":
			w.empty("path", "d", markPath(it.shape, x+swatch/2, cy, 4.5), "fill", it.color)
		case "ring":
			w.empty("circle", "cx", num(x+swatch/2), "cy", num(cy), "r", "6", "fill", "none", "stroke", it.color, "stroke-width", "2")
		case "band":
			w.empty("rect", "x", num(x), "y", num(cy-6), "width", num(swatch), "height", "12", "fill", it.color, "fill-opacity", "0.18")
		default:
			w.empty("rect", "x", num(x+2), "y", num(cy-6), "width", "12", "height", "12", "fill", it.color)
		}
		w.elem("text", it.label, "x", num(x+swatch+5), "y", num(cy+4), "fill", colorText)
		w.close("g")
		x += iw
	}
	w.close("g")
	return float64(row+1) * rowH
}

// legendHeight is the height legend would use, without drawing.
func legendHeight(items []legendItem, x0, x1 float64) float64 {
	if len(items) == 0 {
		return 0
	}
	x, rows := x0, 1
	for _, it := range items {
		iw := 16 + 5 + textWidth(it.label, 12) + 18
		if x > x0 && x+iw > x1 {
			x = x0
			rows++
		}
		x += iw
	}
	return float64(rows) * 18
}

// valueAxis draws horizontal grid lines with labels left of the plot and the
// rotated axis title.
func (w *svgWriter) valueAxis(s linearScale, u Unit, left, right float64, title string) {
	w.open("g", "class", "axis axis-y")
	for _, t := range s.ticks {
		y := s.at(t)
		stroke := colorGrid
		if t == 0 {
			stroke = colorAxis
		}
		w.empty("line", "x1", num(left), "y1", num(y), "x2", num(right), "y2", num(y), "stroke", stroke, "stroke-width", "1")
		w.elem("text", u.tick(t, s.step), "x", num(left-6), "y", num(y+4), "text-anchor", "end", "fill", colorMuted)
	}
	if title != "" {
		mid := (s.p0 + s.p1) / 2
		w.elem("text", title, "x", "14", "y", num(mid), "text-anchor", "middle", "fill", colorText,
			"transform", "rotate(-90 14 "+num(mid)+")")
	}
	w.close("g")
}

// axisTitle writes the x-axis title centred under the plot.
func (w *svgWriter) axisTitle(title string, left, right, y float64) {
	if title != "" {
		w.elem("text", title, "class", "axis-title", "x", num((left+right)/2), "y", num(y), "text-anchor", "middle", "fill", colorText)
	}
}

// finiteRange returns the smallest and largest finite values (0, 0 if none).
func finiteRange(series []Series) (lo, hi float64, any bool) {
	lo, hi = math.Inf(1), math.Inf(-1)
	for _, s := range series {
		for _, v := range s.Values {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				continue
			}
			lo, hi, any = math.Min(lo, v), math.Max(hi, v), true
		}
	}
	if !any {
		return 0, 0, false
	}
	return lo, hi, true
}

// LineChart draws one line per series over categorical x positions (e.g.
// days), each point a circle carrying data-series, data-x and data-value and
// a tooltip. The value axis starts at 0 unless a value is negative.
// Default size 640×340.
func LineChart(x []string, series []Series, f Frame) []byte {
	width, height := f.size(640, 340)
	var w svgWriter
	w.root("line", f, width, height)
	const left, right, bottom = 64.0, 20.0, 52.0
	items := make([]legendItem, len(series))
	for i, s := range series {
		items[i] = legendItem{label: s.Name, color: seriesColor(s.Color, i), dash: seriesDash(i), marker: "line"}
	}
	lo, hi, any := finiteRange(series)
	if !any || len(x) == 0 {
		w.noData(width/2, height/2, "No credited conversions in this window yet")
		return w.bytes()
	}
	top := 10 + w.legend(items, left, width-right, 8) + 14
	ys := niceScale(math.Min(0, lo), hi, 6, height-bottom, top)
	w.valueAxis(ys, f.Unit, left, width-right, f.YLabel)
	xAt := func(i int) float64 {
		if len(x) == 1 {
			return (left + width - right) / 2
		}
		return left + 8 + float64(i)*(width-right-left-16)/float64(len(x)-1)
	}
	// Label every k-th position so that labels do not overlap.
	longest := 0.0
	for _, l := range x {
		longest = math.Max(longest, textWidth(l, 12))
	}
	k := int(math.Ceil(float64(len(x)) * (longest + 10) / (width - left - right)))
	k = max(k, 1)
	w.open("g", "class", "axis axis-x")
	for i, l := range x {
		if (len(x)-1-i)%k != 0 { // keep the latest position labelled
			continue
		}
		px := xAt(i)
		w.empty("line", "x1", num(px), "y1", num(height-bottom), "x2", num(px), "y2", num(height-bottom+5), "stroke", colorAxis)
		w.elem("text", l, "x", num(px), "y", num(height-bottom+18), "text-anchor", "middle", "fill", colorMuted)
	}
	w.close("g")
	w.axisTitle(f.XLabel, left, width-right, height-10)
	for i, s := range series {
		color := seriesColor(s.Color, i)
		w.open("g", "class", "series", "data-series", s.Name)
		var d strings.Builder
		pen := false
		for j, v := range s.Values {
			if j >= len(x) || math.IsNaN(v) || math.IsInf(v, 0) {
				pen = false
				continue
			}
			if pen {
				d.WriteString(" L")
			} else {
				if d.Len() > 0 {
					d.WriteByte(' ')
				}
				d.WriteByte('M')
			}
			d.WriteString(num(xAt(j)) + " " + num(ys.at(v)))
			pen = true
		}
		kv := []string{"d", d.String(), "fill", "none", "stroke", color, "stroke-width", "2.5", "stroke-linejoin", "round"}
		if dash := seriesDash(i); dash != "" {
			kv = append(kv, "stroke-dasharray", dash)
		}
		w.empty("path", kv...)
		for j, v := range s.Values {
			if j >= len(x) || math.IsNaN(v) || math.IsInf(v, 0) {
				continue
			}
			w.tip("circle", s.tip(j, x[j], f.Unit), "class", "point", "cx", num(xAt(j)), "cy", num(ys.at(v)), "r", "3.5",
				"fill", color, "stroke", colorBackground, "stroke-width", "1",
				"data-series", s.Name, "data-x", x[j], "data-value", exact(v))
		}
		w.close("g")
	}
	return w.bytes()
}
