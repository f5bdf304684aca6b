package dashboard

import "math"

// FunnelBar is one step of an in-order funnel.
type FunnelBar struct {
	Step        string
	Sessions    int64   // sessions that reached the step in order
	Abandonment float64 // share of them that did not reach the next step (0 for the last)
}

// FunnelChart draws the funnel as horizontal bars, one per step, the length
// proportional to the sessions that reached it. The part of a bar that did
// not reach the next step is drawn in the second colour and its share is
// printed. Each step's group carries data-step, data-value (sessions) and
// data-abandonment. Default width 640; the height follows the steps.
func FunnelChart(steps []FunnelBar, f Frame) []byte {
	width, _ := f.size(640, 0)
	const rowH, top, bottom = 58.0, 44.0, 20.0
	height := top + float64(max(len(steps), 1))*rowH + bottom
	var w svgWriter
	w.root("funnel", f, width, height)
	var first int64
	if len(steps) > 0 {
		first = steps[0].Sessions
	}
	peak := int64(0)
	for _, s := range steps {
		peak = max(peak, s.Sessions)
	}
	if peak == 0 {
		w.noData(width/2, height/2, "No sessions reached the funnel in this window yet")
		return w.bytes()
	}
	longest := 0.0
	for _, s := range steps {
		longest = math.Max(longest, textWidth(clip(s.Step, 20), 12))
	}
	left := longest + 20
	right := 150.0
	barMax := width - left - right
	w.legend([]legendItem{
		{label: "went on to the next step", color: colorContinue, marker: "box"},
		{label: "left at this step", color: colorDrop, marker: "box"},
	}, left, width-12, 8)
	for i, s := range steps {
		y := top + float64(i)*rowH
		full := float64(s.Sessions) / float64(peak) * barMax
		drop := full * s.Abandonment
		if i == len(steps)-1 {
			drop = 0
		}
		w.open("g", "class", "funnel-step", "data-step", s.Step, "data-value", exactInt(s.Sessions), "data-abandonment", exact(s.Abandonment))
		tip := s.Step + ": " + Count.format(float64(s.Sessions)) + " sessions"
		if first > 0 {
			tip += " (" + Percent.format(float64(s.Sessions)/float64(first)) + " of the first step)"
		}
		if i < len(steps)-1 {
			tip += "; " + Percent.format(s.Abandonment) + " left before " + steps[i+1].Step
		}
		w.elem("title", tip)
		w.open("text", "x", num(left-10), "y", num(y+18), "text-anchor", "end", "fill", colorText)
		w.escape(clip(s.Step, 20))
		w.close("text")
		w.empty("rect", "class", "reached", "x", num(left), "y", num(y+4), "width", num(math.Max(full-drop, 0)), "height", "22", "fill", colorContinue)
		if drop > 0 {
			w.empty("rect", "class", "dropped", "x", num(left+full-drop), "y", num(y+4), "width", num(drop), "height", "22", "fill", colorDrop)
		}
		label := Count.format(float64(s.Sessions))
		if first > 0 && i > 0 {
			label += " · " + Percent.format(float64(s.Sessions)/float64(first)) + " of first"
		}
		w.elem("text", label, "x", num(left+full+6), "y", num(y+20), "fill", colorText)
		if i < len(steps)-1 {
			w.elem("text", "↓ "+Percent.format(s.Abandonment)+" left before "+clip(steps[i+1].Step, 24),
				"class", "drop-note", "x", num(left+4), "y", num(y+44), "fill", colorMuted, "font-size", "11")
		}
		w.close("g")
	}
	w.axisTitle(f.XLabel, left, left+barMax, height-14)
	return w.bytes()
}
