package dashboard

import "math"

// NextCell is one cell of the next-step table: of the steps out of the
// row's state, how many went to the column's state and their share.
type NextCell struct {
	Has   bool    // false: no session went this way
	Count int64   // transitions from the row's state to the column's
	Share float64 // Count / the row's Total (the row probability)
}

// NextRow is one row of the next-step table: a state a session can be in
// (the session's start, or an action) and where its next step went.
type NextRow struct {
	From  string
	Total int64      // transitions out of From
	Cells []NextCell // one per column
}

// NextSteps draws where sessions go next, one step at a time, as a table:
// one row per state a session can be in (its start, then each action), one
// column per next state (each action, then the session's end). Each cell
// holds a bar on a light track whose length is the row's share going to the
// column, with the share printed after it; bars that end the session have
// their own colour. Left of the rows stand the state's name and how many
// steps leave it.
//
// A row carries data-row and data-value (its Total); a cell carries
// data-row, data-col, data-value (its share) and data-count. exitCol names
// the column of the session's end. Default width 960; the height follows the
// rows.
func NextSteps(rows []NextRow, cols []string, exitCol string, f Frame) []byte {
	width, _ := f.size(960, 0)
	longest := 0.0
	for _, r := range rows {
		longest = math.Max(longest, textWidth(clip(r.From, 20), 12))
	}
	nameW := math.Min(longest, 150) + 12
	const countW, right, headH, rowH = 70.0, 12.0, 34.0, 30.0
	left := nameW + countW + 12
	cellW := 120.0
	if n := float64(len(cols)); n > 0 {
		cellW = math.Min(cellW, (width-left-right)/n)
	}
	maxChars := int((cellW - 6) / (0.6 * 12))
	const topPad = 8.0
	height := topPad + headH + float64(len(rows))*rowH + 40
	var w svgWriter
	w.root("nextsteps", f, width, height)
	if len(rows) == 0 || len(cols) == 0 {
		w.noData(width/2, height/2, "No sessions ended in this window yet")
		return w.bytes()
	}
	top := topPad + headH
	w.open("g", "class", "axis axis-col")
	w.elem("text", "from", "x", num(nameW-2), "y", num(top-10), "text-anchor", "end", "fill", colorMuted)
	w.elem("text", "steps out", "x", num(nameW+countW), "y", num(top-10), "text-anchor", "end", "fill", colorMuted)
	w.elem("text", "next step →", "x", num(left), "y", num(top-24), "fill", colorMuted)
	for j, c := range cols {
		w.open("text", "x", num(left+float64(j)*cellW+3), "y", num(top-10), "fill", colorText, "font-weight", "600")
		w.elem("title", c)
		w.escape(clip(c, maxChars))
		w.close("text")
	}
	w.empty("line", "x1", num(6), "y1", num(top-2), "x2", num(width-right), "y2", num(top-2), "stroke", colorAxis, "stroke-width", "1")
	w.close("g")
	barMax := cellW - 44
	for i, r := range rows {
		y := top + float64(i)*rowH
		w.open("g", "class", "row", "data-row", r.From, "data-value", exactInt(r.Total))
		if i%2 == 0 {
			w.empty("rect", "class", "row-band", "x", "6", "y", num(y), "width", num(width-right-6), "height", num(rowH), "fill", colorBand)
		}
		w.open("text", "x", num(nameW-2), "y", num(y+rowH/2+4), "text-anchor", "end", "fill", colorText)
		w.elem("title", r.From)
		w.escape(clip(r.From, 20))
		w.close("text")
		w.elem("text", Count.format(float64(r.Total)), "x", num(nameW+countW), "y", num(y+rowH/2+4), "text-anchor", "end", "fill", colorMuted)
		for j, c := range cols {
			x := left + float64(j)*cellW
			var cell NextCell
			if j < len(r.Cells) {
				cell = r.Cells[j]
			}
			w.empty("rect", "class", "track", "x", num(x+3), "y", num(y+rowH/2-5), "width", num(barMax), "height", "10", "fill", colorEmpty)
			if !cell.Has {
				w.elem("text", "–", "x", num(x+3+barMax+4), "y", num(y+rowH/2+4), "fill", colorMuted)
				continue
			}
			color := colorNext
			if c == exitCol {
				color = colorExit
			}
			w.open("g", "class", "cell", "data-row", r.From, "data-col", c, "data-value", exact(cell.Share), "data-count", exactInt(cell.Count))
			w.elem("title", r.From+" → "+c+": "+Percent.format(cell.Share)+" of the "+Count.format(float64(r.Total))+" steps out of "+r.From+
				" ("+Count.format(float64(cell.Count))+")")
			w.empty("rect", "class", "bar", "x", num(x+3), "y", num(y+rowH/2-5), "width", num(math.Max(cell.Share*barMax, 1)), "height", "10", "fill", color)
			w.elem("text", cellPercent(cell.Share), "x", num(x+3+barMax+4), "y", num(y+rowH/2+4), "fill", colorText, "font-size", "11")
			w.close("g")
		}
		w.close("g")
	}
	ly := top + float64(len(rows))*rowH + 20
	w.legend([]legendItem{
		{label: "share of the row's steps going on to an action", color: colorNext, marker: "box"},
		{label: "share ending the session (" + exitCol + ")", color: colorExit, marker: "box"},
	}, left, width-right, ly-8)
	return w.bytes()
}
