package credit

import (
	"errors"
	"fmt"
	"slices"
	"strings"
)

// Reserved Markov states. They start with the byte 0x00, which no channel
// state does.
const (
	StateEntry     = "\x00entry"
	StateConverted = "\x00converted"
	StateLost      = "\x00lost"
)

// stateSep joins the channels of a state's tuple. Channel names must not
// contain it, and must not start with 0x00.
const stateSep = "\x1f"

// StateOf returns the state of a channel tuple: the names joined with 0x1f.
func StateOf(channels []string) string { return strings.Join(channels, stateSep) }

// StateChannels returns the channel tuple of a state, the inverse of StateOf.
// It returns nil for the reserved states and for "".
func StateChannels(s string) []string {
	if s == "" || s[0] == 0 {
		return nil
	}
	return strings.Split(s, stateSep)
}

// Transition is one step of a journey through the Markov states.
type Transition struct{ From, To string }

// PathTransitions appends to dst the order-k transitions of one journey path
// and returns the extended slice: @entry → (c1) → (c1,c2) → … where each state
// is the tuple of the last <= k channels (so the first k−1 states are the
// shorter prefixes, the same as padding with @entry), then → @converted if
// converted, else → @lost. With collapse, consecutive repeats of a channel are
// removed from the path first. An empty path gives @entry → @converted/@lost.
// k < 1 is taken as 1. The states of one call share a single allocated string.
func PathTransitions(dst []Transition, path []string, k int, converted, collapse bool) []Transition {
	if k < 1 {
		k = 1
	}
	end := StateLost
	if converted {
		end = StateConverted
	}
	skip := func(i int) bool { return collapse && i > 0 && path[i] == path[i-1] }

	size, m := 0, 0
	for i, c := range path {
		if skip(i) {
			continue
		}
		if m > 0 {
			size += len(stateSep)
		}
		size += len(c)
		m++
	}
	var b strings.Builder
	b.Grow(size)
	wrote := false
	for i, c := range path {
		if skip(i) {
			continue
		}
		if wrote {
			b.WriteString(stateSep)
		}
		b.WriteString(c)
		wrote = true
	}
	joined := b.String()

	from := StateEntry
	winStart, pos, inWindow := 0, 0, 0
	for i, c := range path {
		if skip(i) {
			continue
		}
		stop := pos + len(c)
		inWindow++
		if inWindow > k {
			winStart += strings.IndexByte(joined[winStart:], stateSep[0]) + 1
			inWindow = k
		}
		to := joined[winStart:stop]
		dst = append(dst, Transition{From: from, To: to})
		from = to
		pos = stop + len(stateSep)
	}
	return append(dst, Transition{From: from, To: end})
}

// TransitionCount is an aggregated transition count: how many journeys
// stepped From → To. Counts of several time buckets or partitions add.
type TransitionCount struct {
	From, To string
	Count    int64
}

// MarkovResult is the answer of Markov.
type MarkovResult struct {
	Order         int       // longest channel tuple of any state
	PConversion   float64   // P(reach @converted from @entry)
	Channels      []string  // every channel named by a state, sorted
	RemovalEffect []float64 // 1 − P_{−c}/P per channel, in [0, 1]
	Share         []float64 // RemovalEffect normalised to sum 1
}

// ErrNoConversionPath is returned by Markov when @converted cannot be reached
// from @entry (P = 0): removal effects are undefined.
var ErrNoConversionPath = errors.New("markov: no path from @entry to @converted")

// ErrNoRemovalEffect is returned by Markov when every removal effect is 0
// (every conversion path avoids all channels), so there is nothing to share.
var ErrNoRemovalEffect = errors.New("markov: every removal effect is zero")

// Markov computes the conversion probability and each channel's removal
// effect from aggregated transition counts of one order (see the package
// overview for the formulas). Removing channel c sends every transition into
// a state whose tuple contains c to @lost. Counts may repeat a (From, To) pair;
// repeats add. Zero counts are ignored; negative counts, transitions out of
// @converted or @lost and transitions into @entry are errors. On
// ErrNoConversionPath or ErrNoRemovalEffect the result holds what was
// computed (Order, Channels, PConversion and the zero removal effects).
func Markov(counts []TransitionCount) (MarkovResult, error) {
	ch, err := buildChain(counts)
	if err != nil {
		return MarkovResult{}, err
	}
	return ch.removalEffects(denseLimit)
}

// removalEffects solves the full chain and one chain per channel removal.
// Systems with at most dense transient states use gonum's dense LU.
func (ch *chain) removalEffects(dense int) (MarkovResult, error) {
	res := MarkovResult{Order: ch.order, Channels: ch.channels}
	res.RemovalEffect = make([]float64, len(ch.channels))
	if ch.n == 0 {
		return res, ErrNoConversionPath
	}
	// One removal system per channel that occurs in a kept state; the
	// others cannot change P, their removal effect is 0.
	var removals [][]int32
	system := make([]int, len(ch.channels))
	for c, states := range ch.statesOf {
		system[c] = -1
		if len(states) > 0 {
			system[c] = len(removals)
			removals = append(removals, states)
		}
	}
	var p float64
	var pRemoved []float64
	var err error
	if ch.n > dense {
		p, pRemoved, err = ch.sweepProbabilities(removals)
	} else {
		p, pRemoved, err = ch.denseProbabilities(removals)
	}
	if err != nil {
		return res, err
	}
	res.PConversion = p
	if !(p > 0) {
		res.PConversion = 0
		return res, ErrNoConversionPath
	}
	var sum float64
	for c, j := range system {
		if j < 0 {
			continue
		}
		re := 1 - pRemoved[j]/p
		// P_{−c} <= P holds exactly; rounding and the iterative solver's
		// tolerance can leave a removal effect a hair outside [0, 1].
		re = min(max(re, 0), 1)
		if re < reFloor {
			re = 0
		}
		res.RemovalEffect[c] = re
		sum += re
	}
	if sum == 0 {
		return res, ErrNoRemovalEffect
	}
	res.Share = make([]float64, len(ch.channels))
	for c, re := range res.RemovalEffect {
		res.Share[c] = re / sum
	}
	return res, nil
}

// denseProbabilities returns P(@converted | @entry) without removal and with
// each removal set, one gonum LU solve per system.
func (ch *chain) denseProbabilities(removals [][]int32) (float64, []float64, error) {
	s := newDenseSolver(ch)
	x := make([]float64, ch.n)
	if err := s.solve(x, nil); err != nil {
		return 0, nil, err
	}
	p := x[0]
	out := make([]float64, len(removals))
	if !(p > 0) {
		return 0, out, nil
	}
	removed := make([]bool, ch.n)
	for j, set := range removals {
		for _, st := range set {
			removed[st] = true
		}
		if err := s.solve(x, removed); err != nil {
			return 0, nil, fmt.Errorf("removal %d of %d: %w", j+1, len(removals), err)
		}
		for _, st := range set {
			removed[st] = false
		}
		out[j] = x[0]
	}
	return p, out, nil
}

// reFloor: removal effects below it are within the solvers' error of zero
// and are reported as exactly zero.
const reFloor = 1e-9

// chain is the transient part of an absorbing Markov chain in compressed
// sparse row form, restricted to states reachable from @entry that can reach
// @converted (every other state has conversion probability 0, with or without
// a removal). State 0 is @entry; the rest are numbered in breadth-first order
// from @entry.
type chain struct {
	n        int
	rowStart []int32   // row s holds edges rowStart[s]:rowStart[s+1]
	col      []int32   // edge target (a transient state, never s itself)
	prob     []float64 // edge probability
	conv     []float64 // p(s → @converted)
	stay     []float64 // p(s → s), the self-loop
	invStay  []float64 // 1 / (1 − p(s → s))
	names    []string  // state names, for error messages and tests
	channels []string  // sorted channel names
	statesOf [][]int32 // per channel, the kept states whose tuple contains it
	order    int
}

// edge is one aggregated input transition between interned states.
type edge struct {
	from, to int32 // to: a state index, or toConv / toNull
	count    int64
}

const (
	toConv int32 = -1
	toNull int32 = -2
)

// buildChain validates and interns the counts, turns them into
// probabilities, prunes states that cannot matter and indexes channels.
func buildChain(counts []TransitionCount) (*chain, error) {
	// States have several outgoing transitions each: a quarter of the
	// counts is a fair first guess at the number of states.
	index := make(map[string]int32, len(counts)/4+1)
	index[StateEntry] = 0
	names := make([]string, 1, len(counts)/4+1)
	names[0] = StateEntry
	intern := func(s string) int32 {
		if i, ok := index[s]; ok {
			return i
		}
		i := int32(len(names))
		index[s] = i
		names = append(names, s)
		return i
	}
	edges := make([]edge, 0, len(counts))
	// Stored counts usually come grouped by source state: remember the
	// last one to skip its validation and lookup.
	lastFrom, lastID := "", int32(-1)
	for _, tc := range counts {
		if tc.Count < 0 {
			return nil, fmt.Errorf("markov: transition %s -> %s: negative count %d", label(tc.From), label(tc.To), tc.Count)
		}
		from := lastID
		if from < 0 || tc.From != lastFrom {
			if err := checkFrom(tc.From); err != nil {
				return nil, err
			}
			from = intern(tc.From)
			lastFrom, lastID = tc.From, from
		}
		to, err := targetOf(tc.To)
		if err != nil {
			return nil, err
		}
		if tc.Count == 0 {
			continue
		}
		if to == 0 {
			to = intern(tc.To)
		}
		edges = append(edges, edge{from: from, to: to, count: tc.Count})
	}
	all := len(names)

	// Channels and the order come from every state, kept or not. tuple
	// holds each state's channel indices (first-seen numbering, remapped to
	// sorted order below) at tupleStart[s]:tupleStart[s+1].
	chanIndex := map[string]int32{}
	var channels []string
	order := 0
	tupleStart := make([]int32, all+1)
	tuple := make([]int32, 0, all)
	for s, name := range names {
		if s > 0 {
			parts := 0
			for rest, more := name, true; more; parts++ {
				var c string
				c, rest, more = strings.Cut(rest, stateSep)
				ci, ok := chanIndex[c]
				if !ok {
					ci = int32(len(channels))
					chanIndex[c] = ci
					channels = append(channels, strings.Clone(c))
				}
				tuple = append(tuple, ci)
			}
			order = max(order, parts)
		}
		tupleStart[s+1] = int32(len(tuple))
	}
	sorted := make([]int32, len(channels))
	for i := range sorted {
		sorted[i] = int32(i)
	}
	slices.SortFunc(sorted, func(a, b int32) int { return strings.Compare(channels[a], channels[b]) })
	rank := make([]int32, len(channels))
	for r, i := range sorted {
		rank[i] = int32(r)
	}
	for i, ci := range tuple {
		tuple[i] = rank[ci]
	}
	slices.Sort(channels)

	// Row totals and adjacency over all interned states.
	total := make([]int64, all)
	outDeg := make([]int32, all+1)
	for _, e := range edges {
		total[e.from] += e.count
		if total[e.from] < 0 {
			return nil, fmt.Errorf("markov: counts out of %s overflow int64", label(names[e.from]))
		}
		if e.to >= 0 {
			outDeg[e.from+1]++
		}
	}
	for i := range all {
		outDeg[i+1] += outDeg[i]
	}
	adj := make([]int32, outDeg[all])
	fill := slices.Clone(outDeg[:all])
	canConv := make([]bool, all)
	for _, e := range edges {
		if e.to >= 0 {
			adj[fill[e.from]] = e.to
			fill[e.from]++
		} else if e.to == toConv {
			canConv[e.from] = true
		}
	}

	// Reachable from @entry: breadth-first, which also gives the numbering.
	newID := make([]int32, all)
	for i := range newID {
		newID[i] = -1
	}
	bfs := []int32{0}
	newID[0] = 0
	for h := 0; h < len(bfs); h++ {
		s := bfs[h]
		for _, t := range adj[outDeg[s]:outDeg[s+1]] {
			if newID[t] < 0 {
				newID[t] = 0
				bfs = append(bfs, t)
			}
		}
	}
	// Can reach @converted: backward breadth-first search from the states
	// with a conversion edge, over the reversed adjacency.
	inDeg := make([]int32, all+1)
	for _, t := range adj {
		inDeg[t+1]++
	}
	for i := range all {
		inDeg[i+1] += inDeg[i]
	}
	radj := make([]int32, len(adj))
	rfill := slices.Clone(inDeg[:all])
	for s := range all {
		for _, t := range adj[outDeg[s]:outDeg[s+1]] {
			radj[rfill[t]] = int32(s)
			rfill[t]++
		}
	}
	queue := make([]int32, 0, all)
	for s, ok := range canConv {
		if ok {
			queue = append(queue, int32(s))
		}
	}
	for h := 0; h < len(queue); h++ {
		t := queue[h]
		for _, s := range radj[inDeg[t]:inDeg[t+1]] {
			if !canConv[s] {
				canConv[s] = true
				queue = append(queue, s)
			}
		}
	}

	ch := &chain{channels: channels, order: order, statesOf: make([][]int32, len(channels))}
	if !canConv[0] {
		return ch, nil // P = 0
	}
	kept := bfs[:0:0]
	for _, s := range bfs {
		if canConv[s] {
			newID[s] = int32(len(kept))
			kept = append(kept, s)
		} else {
			newID[s] = -1
		}
	}
	n := len(kept)
	ch.n = n
	ch.names = make([]string, n)
	ch.conv = make([]float64, n)
	ch.stay = make([]float64, n)
	ch.rowStart = make([]int32, n+1)
	for _, e := range edges {
		if id := newID[e.from]; id >= 0 && e.to >= 0 && newID[e.to] >= 0 && e.to != e.from {
			ch.rowStart[id+1]++
		}
	}
	for i := range n {
		ch.rowStart[i+1] += ch.rowStart[i]
	}
	ch.col = make([]int32, ch.rowStart[n])
	ch.prob = make([]float64, ch.rowStart[n])
	next := slices.Clone(ch.rowStart[:n])
	for _, e := range edges {
		id := newID[e.from]
		if id < 0 {
			continue
		}
		p := float64(e.count) / float64(total[e.from])
		switch {
		case e.to == toConv:
			ch.conv[id] += p
		case e.to == toNull:
		case e.to == e.from:
			ch.stay[id] += p
		case newID[e.to] >= 0:
			ch.col[next[id]] = newID[e.to]
			ch.prob[next[id]] = p
			next[id]++
		}
	}
	ch.invStay = make([]float64, n)
	for id, s := range kept {
		ch.invStay[id] = 1 / (1 - ch.stay[id])
		ch.names[id] = names[s]
		for _, ci := range tuple[tupleStart[s]:tupleStart[s+1]] {
			list := ch.statesOf[ci]
			if len(list) > 0 && list[len(list)-1] == int32(id) {
				continue // the channel occurs twice in this tuple
			}
			ch.statesOf[ci] = append(list, int32(id))
		}
	}
	return ch, nil
}

// checkFrom validates a transition's source state.
func checkFrom(s string) error {
	switch {
	case s == StateEntry:
		return nil
	case s == StateConverted || s == StateLost:
		return fmt.Errorf("markov: transition out of absorbing state %s", label(s))
	case s == "" || s[0] == 0:
		return fmt.Errorf("markov: invalid source state %q", s)
	}
	return nil
}

// targetOf validates a transition's target: toConv, toNull, or 0 for a
// channel state still to be interned.
func targetOf(s string) (int32, error) {
	switch {
	case s == StateConverted:
		return toConv, nil
	case s == StateLost:
		return toNull, nil
	case s == StateEntry:
		return 0, errors.New("markov: transition into @entry")
	case s == "" || s[0] == 0:
		return 0, fmt.Errorf("markov: invalid target state %q", s)
	}
	return 0, nil
}

// label renders a state for messages as answers name it: a reserved state
// as @entry, @converted or @lost, a tuple with " → " between channels.
func label(s string) string {
	if s != "" && s[0] == 0 {
		return "@" + s[1:]
	}
	return "(" + strings.ReplaceAll(s, stateSep, " → ") + ")"
}
