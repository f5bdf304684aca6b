package pathstats

// FunnelDepth returns how many of the ordered steps a session reached in
// order (an in-order funnel): step i counts only if steps 0..i−1 were reached at
// earlier actions of the same session. 0 means the session never reached the
// first step. Actions that are not the next step are ignored, so other
// actions may come between steps; a step seen before its predecessors does
// not count. Repeated steps (steps[i] == steps[j]) need separate actions.
//
// Scanning once and advancing on the next expected step is exact: it finds
// the earliest action for every step, so no other matching reaches further.
func FunnelDepth(actions []string, steps []string) int {
	depth := 0
	for _, a := range actions {
		if depth == len(steps) {
			break
		}
		if a == steps[depth] {
			depth++
		}
	}
	return depth
}

// AddDepth counts n sessions that reached depth steps into reached, the
// per-step session counts of an in-order funnel: reached[i] += n for every
// i < depth. depth beyond len(reached) counts every step.
func AddDepth(reached []int64, depth int, n int64) {
	for i := range min(depth, len(reached)) {
		reached[i] += n
	}
}

// Abandonment returns the share of the from sessions that did not go on to
// the next stage, 1 − to/from, computed as (from − to)/from so that it is the
// correctly rounded value of the exact fraction. It is 0 when from <= 0
// (nobody to abandon). Step abandonment is Abandonment(n_i, n_{i+1}); basket
// abandonment is Abandonment(basket sessions, their orders).
func Abandonment(from, to int64) float64 {
	if from <= 0 {
		return 0
	}
	return float64(from-to) / float64(from)
}

// StepAbandonment returns the step abandonment a_i = 1 − reached[i+1]/reached[i]
// for every step but the last (len(reached) − 1 values; none for fewer than
// two steps). The last step has no next step, so no abandonment of its own.
func StepAbandonment(reached []int64) []float64 {
	if len(reached) < 2 {
		return nil
	}
	out := make([]float64, len(reached)-1)
	for i := range out {
		out[i] = Abandonment(reached[i], reached[i+1])
	}
	return out
}
