package dashboard

import "math"

// HeatCell is one cell of a heatmap.
type HeatCell struct {
	Has   bool    // false: nothing observed (drawn blank)
	Value float64 // coloured and printed, in the frame's Unit (0..1 for Percent)
	Count int64   // the observations behind the value (shown in the tooltip)
	Tip   string  // tooltip; empty takes "row → col: value (count)"
}

// Heatmap draws a matrix: rows down the left, columns across the top (their
// labels turned), each cell coloured by its value on a light-to-dark ramp
// from 0 to 1 and printed. A cell carries data-row, data-col, data-value and
// data-count. Below the matrix a ramp legend shows the scale. Default width
// 640; the height follows the rows.
func Heatmap(rows, cols []string, cells [][]HeatCell, f Frame) []byte {
	width, _ := f.size(640, 0)
	longestRow, longestCol := 0.0, 0.0
	for _, r := range rows {
		longestRow = math.Max(longestRow, textWidth(clip(r, 22), 12))
	}
	for _, c := range cols {
		longestCol = math.Max(longestCol, textWidth(clip(c, 22), 12))
	}
	left := math.Min(longestRow, 170) + 16
	top := 14 + math.Min(longestCol, 150)*0.72 + 12 // column labels at −45°
	// A label turned by −45° reaches 0.71 of its length to the right of its
	// column's centre; the last one must stay inside the chart.
	reach := math.Min(longestCol, 150) * 0.71
	cellW := 62.0
	if n := float64(len(cols)); n > 0 {
		cellW = math.Min(cellW, (width-left-12-math.Max(0, reach-cellW/2))/n)
	}
	const cellH = 30.0
	height := top + float64(len(rows))*cellH + 74
	var w svgWriter
	w.root("heatmap", f, width, height)
	if len(rows) == 0 || len(cols) == 0 {
		w.noData(width/2, height/2, "No journeys in this window yet")
		return w.bytes()
	}
	w.open("g", "class", "axis axis-col")
	for j, c := range cols {
		cx := left + (float64(j)+0.5)*cellW
		// The label shows the clipped name; its <title> holds the full one.
		w.open("text", "x", num(cx), "y", num(top-8), "fill", colorText,
			"transform", "rotate(-45 "+num(cx)+" "+num(top-8)+")")
		w.elem("title", c)
		w.escape(clip(c, 22))
		w.close("text")
	}
	w.close("g")
	w.open("g", "class", "axis axis-row")
	for i, r := range rows {
		w.open("text", "x", num(left-8), "y", num(top+float64(i)*cellH+cellH/2+4), "text-anchor", "end", "fill", colorText)
		w.elem("title", r)
		w.escape(clip(r, 22))
		w.close("text")
	}
	w.close("g")
	for i, r := range rows {
		w.open("g", "class", "row", "data-row", r)
		for j, c := range cols {
			x, y := left+float64(j)*cellW, top+float64(i)*cellH
			var cell HeatCell
			if i < len(cells) && j < len(cells[i]) {
				cell = cells[i][j]
			}
			if !cell.Has {
				w.empty("rect", "class", "cell-empty", "x", num(x+1), "y", num(y+1), "width", num(cellW-2), "height", num(cellH-2),
					"fill", colorEmpty, "data-row", r, "data-col", c)
				continue
			}
			fill := heatColor(cell.Value)
			tip := cell.Tip
			if tip == "" {
				tip = r + " → " + c + ": " + f.Unit.format(cell.Value) + " (" + Count.format(float64(cell.Count)) + ")"
			}
			w.open("g", "class", "cell", "data-row", r, "data-col", c, "data-value", exact(cell.Value), "data-count", exactInt(cell.Count))
			w.elem("title", tip)
			w.empty("rect", "x", num(x+1), "y", num(y+1), "width", num(cellW-2), "height", num(cellH-2), "fill", fill)
			label := f.Unit.format(cell.Value)
			if f.Unit == Percent {
				label = cellPercent(cell.Value)
			}
			w.elem("text", label, "x", num(x+cellW/2), "y", num(y+cellH/2+4), "text-anchor", "middle", "fill", inkOn(fill), "font-size", "11")
			w.close("g")
		}
		w.close("g")
	}
	// Ramp legend.
	ly := top + float64(len(rows))*cellH + 22
	lx, lw := left, math.Min(260, width-left-20)
	gid := f.id() + "-ramp"
	w.open("defs")
	w.open("linearGradient", "id", gid, "x1", "0", "x2", "1", "y1", "0", "y2", "0")
	for k := range heatRamp {
		off := float64(k) / float64(len(heatRamp)-1)
		w.empty("stop", "offset", num(off), "stop-color", heatColor(off))
	}
	w.close("linearGradient")
	w.close("defs")
	w.open("g", "class", "legend")
	w.empty("rect", "x", num(lx), "y", num(ly), "width", num(lw), "height", "12", "fill", "url(#"+gid+")", "stroke", colorAxis, "stroke-width", "0.5")
	for _, t := range []float64{0, 0.5, 1} {
		w.elem("text", f.Unit.tick(t, 0.5), "x", num(lx+t*lw), "y", num(ly+26), "text-anchor", "middle", "fill", colorMuted)
	}
	w.empty("rect", "x", num(lx+lw+24), "y", num(ly), "width", "16", "height", "12", "fill", colorEmpty, "stroke", colorAxis, "stroke-width", "0.5")
	w.elem("text", "none observed", "x", num(lx+lw+46), "y", num(ly+10), "fill", colorMuted)
	w.axisTitle(f.XLabel, lx, lx+lw, ly+44)
	w.close("g")
	return w.bytes()
}

// cellPercent prints a probability compactly for a cell: whole percent from
// 10 %, one decimal below, "<0.1%" for tiny non-zero values.
func cellPercent(p float64) string {
	switch x := p * 100; {
	case x >= 9.95:
		return group(x, 0) + "%"
	case x >= 0.05:
		return group(x, 1) + "%"
	case x > 0:
		return "<0.1%"
	}
	return "0%"
}
