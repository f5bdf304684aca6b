package dashboard

import (
	"math"
	"sort"
	"strconv"
)

// FlowPath is one whole-session path: its steps in order, without the
// start and end markers.
type FlowPath struct {
	Steps       []string
	Count       int64 // sessions that followed the path
	Conversions int64 // of those, sessions that converted
}

// FlowLink is a transition observed over all sessions, markers included,
// with its share of the transitions out of From.
type FlowLink struct {
	From, To    string
	Count       int64
	Probability float64
}

// FlowData is what Flow draws.
type FlowData struct {
	Sessions   int64      // all sessions in the window
	Paths      []FlowPath // the main paths, most frequent first
	Next       []FlowLink // all transitions (for the tooltips)
	Start, End string     // the markers' names, e.g. @entry and @exit
}

// flowNode is a node of the layered flow: one state at one step.
type flowNode struct {
	col       int
	label     string
	value     int64
	y, h      float64
	outY, inY float64 // next free offset for outgoing / incoming links
	rank      int
	color     string
}

type flowLinkKey struct {
	col      int
	from, to string
}

// Flow draws the main session paths as a layered flow: column 0 is the
// session start, column k the k-th action, and each path ends in an end node
// right after its last action. Node heights and link widths are proportional
// to sessions. Nodes carry data-step, data-node and data-value; links carry
// data-step (the column they leave), data-from, data-to and data-value, and a
// tooltip with the transition's probability over all sessions. Default size
// 1280×380.
func Flow(d FlowData, f Frame) []byte {
	width, height := f.size(1280, 380)
	var w svgWriter
	w.root("flow", f, width, height)
	var total int64
	cols := 0
	for _, p := range d.Paths {
		if p.Count <= 0 || len(p.Steps) == 0 {
			continue
		}
		total += p.Count
		cols = max(cols, len(p.Steps)+2)
	}
	if total == 0 {
		w.noData(width/2, height/2, "No sessions in this window yet")
		return w.bytes()
	}
	// Nodes, links and the rank of each label (first appearance in the
	// paths, which come most frequent first): the order within a column.
	nodes := map[[2]string]*flowNode{}
	key := func(col int, label string) [2]string { return [2]string{strconv.Itoa(col), label} }
	rank := map[string]int{d.Start: -1}
	node := func(col int, label string, n int64) *flowNode {
		k := key(col, label)
		nd := nodes[k]
		if nd == nil {
			if _, ok := rank[label]; !ok && label != d.End {
				rank[label] = len(rank)
			}
			nd = &flowNode{col: col, label: label, rank: rank[label]}
			if label == d.End {
				nd.rank = math.MaxInt
			}
			nodes[k] = nd
		}
		nd.value += n
		return nd
	}
	links := map[flowLinkKey]int64{}
	for _, p := range d.Paths {
		if p.Count <= 0 || len(p.Steps) == 0 {
			continue
		}
		prev := node(0, d.Start, p.Count)
		for i, s := range p.Steps {
			links[flowLinkKey{i, prev.label, s}] += p.Count
			prev = node(i+1, s, p.Count)
		}
		links[flowLinkKey{len(p.Steps), prev.label, d.End}] += p.Count
		node(len(p.Steps)+1, d.End, p.Count)
	}
	// Colours: markers grey, actions by rank.
	labelsByRank := make([]string, 0, len(rank))
	for l := range rank {
		if l != d.Start {
			labelsByRank = append(labelsByRank, l)
		}
	}
	sort.Slice(labelsByRank, func(i, j int) bool { return rank[labelsByRank[i]] < rank[labelsByRank[j]] })
	colorOf := map[string]string{d.Start: colorStart, d.End: colorOther, "…": colorOther}
	ci := 0
	for _, l := range labelsByRank {
		if _, ok := colorOf[l]; !ok {
			colorOf[l] = Palette[ci%len(Palette)]
			ci++
		}
	}
	// Columns.
	byCol := make([][]*flowNode, cols)
	for _, nd := range nodes {
		nd.color = colorOf[nd.label]
		byCol[nd.col] = append(byCol[nd.col], nd)
	}
	const left, right, top, bottom, nodeW, gap = 24.0, 150.0, 44.0, 40.0, 12.0, 16.0
	plotH := height - top - bottom
	// The scale (pixels per session) is the largest at which every column's
	// nodes and the gaps between them fit the plot's height.
	scale := math.Inf(1)
	for _, c := range byCol {
		sort.Slice(c, func(i, j int) bool {
			if c[i].rank != c[j].rank {
				return c[i].rank < c[j].rank
			}
			return c[i].label < c[j].label
		})
		var sum int64
		for _, nd := range c {
			sum += nd.value
		}
		if sum > 0 {
			scale = math.Min(scale, math.Max(plotH-float64(len(c)-1)*gap, plotH/4)/float64(sum))
		}
	}
	colGap := (width - left - right - nodeW) / float64(max(cols-1, 1))
	colX := func(c int) float64 { return left + float64(c)*colGap }
	for _, c := range byCol {
		y := top
		for _, nd := range c {
			nd.y, nd.h = y, math.Max(float64(nd.value)*scale, 1.5)
			nd.outY, nd.inY = nd.y, nd.y
			y += nd.h + gap
		}
	}
	// Column headers.
	w.open("g", "class", "axis axis-step")
	for c := range cols {
		label := "action " + strconv.Itoa(c)
		switch c {
		case 0:
			label = "session start"
		case cols - 1:
			label = "end"
		}
		anchor, x := "middle", colX(c)+nodeW/2
		switch c {
		case 0:
			anchor, x = "start", colX(c)
		case cols - 1:
			anchor, x = "end", colX(c)+nodeW
		}
		w.elem("text", label, "x", num(x), "y", num(top-16), "text-anchor", anchor, "fill", colorMuted)
	}
	w.close("g")
	// Links, in a fixed order: by column, source position, target position.
	next := map[[2]string]FlowLink{}
	for _, l := range d.Next {
		next[[2]string{l.From, l.To}] = l
	}
	type placed struct {
		k        flowLinkKey
		n        int64
		src, dst *flowNode
	}
	var ls []placed
	for k, n := range links {
		ls = append(ls, placed{k, n, nodes[key(k.col, k.from)], nodes[key(k.col+1, k.to)]})
	}
	sort.Slice(ls, func(i, j int) bool {
		a, b := ls[i], ls[j]
		if a.k.col != b.k.col {
			return a.k.col < b.k.col
		}
		if a.src.y != b.src.y {
			return a.src.y < b.src.y
		}
		return a.dst.y < b.dst.y
	})
	// Incoming offsets follow the source order, so sort a second list by
	// target then source to assign them.
	inOrder := make([]int, len(ls))
	for i := range inOrder {
		inOrder[i] = i
	}
	sort.SliceStable(inOrder, func(i, j int) bool {
		a, b := ls[inOrder[i]], ls[inOrder[j]]
		if a.k.col != b.k.col {
			return a.k.col < b.k.col
		}
		if a.dst.y != b.dst.y {
			return a.dst.y < b.dst.y
		}
		return a.src.y < b.src.y
	})
	inAt := make([]float64, len(ls))
	for _, i := range inOrder {
		l := ls[i]
		inAt[i] = l.dst.inY
		l.dst.inY += float64(l.n) * scale
	}
	w.open("g", "class", "links")
	for i, l := range ls {
		th := math.Max(float64(l.n)*scale, 1)
		x0, x1 := colX(l.k.col)+nodeW, colX(l.k.col+1)
		y0, y1 := l.src.outY, inAt[i]
		l.src.outY += float64(l.n) * scale
		xm := (x0 + x1) / 2
		path := "M" + num(x0) + " " + num(y0) +
			" C" + num(xm) + " " + num(y0) + " " + num(xm) + " " + num(y1) + " " + num(x1) + " " + num(y1) +
			" L" + num(x1) + " " + num(y1+th) +
			" C" + num(xm) + " " + num(y1+th) + " " + num(xm) + " " + num(y0+th) + " " + num(x0) + " " + num(y0+th) + " Z"
		tip := l.k.from + " → " + l.k.to + ": " + Count.format(float64(l.n)) + " sessions on the main paths (action " +
			strconv.Itoa(l.k.col) + " to " + strconv.Itoa(l.k.col+1) + ")"
		if t, ok := next[[2]string{l.k.from, l.k.to}]; ok {
			tip += "; over all sessions " + Percent.format(t.Probability) + " of the steps after " + l.k.from + " go to " + l.k.to +
				" (" + Count.format(float64(t.Count)) + ")"
		}
		w.tip("path", tip, "class", "link", "d", path, "fill", l.dst.color, "fill-opacity", "0.38",
			"data-step", strconv.Itoa(l.k.col), "data-from", l.k.from, "data-to", l.k.to, "data-value", exactInt(l.n))
	}
	w.close("g")
	// Nodes on top of the links, labels on top of everything.
	var all []*flowNode
	for _, c := range byCol {
		all = append(all, c...)
	}
	w.open("g", "class", "nodes")
	for _, nd := range all {
		w.open("g", "class", "node", "data-step", strconv.Itoa(nd.col), "data-node", nd.label, "data-value", exactInt(nd.value))
		title := nd.label + " as action " + strconv.Itoa(nd.col) + ": " + Count.format(float64(nd.value)) + " sessions"
		switch {
		case nd.col == 0:
			title = "session start: " + Count.format(float64(nd.value)) + " sessions on the main paths"
		case nd.label == d.End:
			title = "end after " + strconv.Itoa(nd.col-1) + " actions: " + Count.format(float64(nd.value)) + " sessions"
		}
		w.elem("title", title)
		w.empty("rect", "x", num(colX(nd.col)), "y", num(nd.y), "width", num(nodeW), "height", num(nd.h), "fill", nd.color)
		w.close("g")
	}
	w.close("g")
	w.open("g", "class", "labels")
	for _, nd := range all {
		w.elem("text", clip(nd.label, 20)+" "+Count.format(float64(nd.value)),
			"x", num(colX(nd.col)+nodeW+4), "y", num(nd.y+nd.h/2+4), "fill", colorText,
			"stroke", colorBackground, "stroke-width", "3", "paint-order", "stroke", "stroke-linejoin", "round")
	}
	w.close("g")
	note := "The " + strconv.Itoa(len(d.Paths)) + " main paths shown cover " + Count.format(float64(total)) + " sessions"
	if d.Sessions > 0 {
		note += " of " + Count.format(float64(d.Sessions)) + " (" + Percent.format(float64(total)/float64(d.Sessions)) + ")"
	}
	w.elem("text", note+".", "class", "note", "x", num(left), "y", num(height-12), "fill", colorMuted)
	return w.bytes()
}
