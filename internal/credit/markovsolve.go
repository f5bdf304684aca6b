package credit

import (
	"errors"
	"fmt"
	"math"
	"runtime"
	"slices"
	"sync"
	"sync/atomic"

	"gonum.org/v1/gonum/mat"
)

// denseLimit is the largest number of transient states solved with gonum's
// dense LU decomposition; larger chains use Gauss–Seidel sweeps over the
// sparse rows. A Markov answer solves 1 + channels systems: at order 1 (a
// few dozen states) dense LU costs microseconds, while an order-3 chain over
// 20 channels has 7000–8000 states, where one dense LU (2/3·n³ ≈ 3·10¹¹
// flops) would take minutes and the sparse sweeps take milliseconds.
const denseLimit = 160

// Gauss–Seidel stopping rule: stop when the estimated remaining error
// Δ·ρ/(1−ρ) (Δ the largest change of the last sweep, ρ the observed ratio of
// successive changes) is below relTol times the conversion probability. On
// journey data the estimate is conservative by about two orders of
// magnitude: measured errors of P_{−c}/P are ~1e-12. absFloor keeps the rule
// finite when every @entry probability is 0.
const (
	relTol    = 1e-10
	absFloor  = 1e-30
	maxSweeps = 10000
)

// denseSolver solves (I − Q) x = r for a chain with gonum's LU
// decomposition, optionally with some states removed (x fixed at 0 there,
// every transition into them going to @lost).
type denseSolver struct {
	ch  *chain
	a   *mat.Dense
	rhs *mat.VecDense
	sol *mat.VecDense
	lu  mat.LU
}

func newDenseSolver(ch *chain) *denseSolver {
	return &denseSolver{
		ch:  ch,
		a:   mat.NewDense(ch.n, ch.n, nil),
		rhs: mat.NewVecDense(ch.n, nil),
		sol: mat.NewVecDense(ch.n, nil),
	}
}

// solve writes the conversion probability of every transient state into x;
// removed (nil: none) marks the states sent to @lost. It builds I − Q with
// removed states as identity rows (x = 0) and zero columns.
func (s *denseSolver) solve(x []float64, removed []bool) error {
	ch := s.ch
	s.a.Zero()
	for i := range ch.n {
		s.a.Set(i, i, 1)
		if removed != nil && removed[i] {
			s.rhs.SetVec(i, 0)
			continue
		}
		s.a.Set(i, i, 1-ch.stay[i])
		s.rhs.SetVec(i, ch.conv[i])
		for e := ch.rowStart[i]; e < ch.rowStart[i+1]; e++ {
			t := ch.col[e]
			if removed != nil && removed[t] {
				continue
			}
			s.a.Set(i, int(t), s.a.At(i, int(t))-ch.prob[e])
		}
	}
	s.lu.Factorize(s.a)
	if err := s.lu.SolveVecTo(s.sol, false, s.rhs); err != nil {
		return fmt.Errorf("markov: dense solve over %d states: %w", ch.n, err)
	}
	for i := range x {
		x[i] = s.sol.AtVec(i)
	}
	return nil
}

// maxSweepColumns caps the removal systems one Gauss–Seidel run solves
// together: their values sit side by side per state, so each edge is loaded
// once per run for all of them, while 12 columns of ~8000 states (values
// and last changes, 1.5 MiB) still fit a core's cache.
const maxSweepColumns = 12

// sweepProbabilities returns P(@converted | @entry) without removal and with
// each removal set, by Gauss–Seidel sweeps: first the full chain alone, then
// the removal systems in even groups of at most maxSweepColumns, started from
// the full solution (an upper bound) and spread over up to GOMAXPROCS
// goroutines.
func (ch *chain) sweepProbabilities(removals [][]int32) (float64, []float64, error) {
	full := make([]float64, ch.n)
	if err := ch.sweep(full, [][]int32{nil}, nil, 0); err != nil {
		return 0, nil, err
	}
	p := full[0]
	out := make([]float64, len(removals))
	if !(p > 0) || len(removals) == 0 {
		return p, out, nil
	}
	workers := max(1, min(runtime.GOMAXPROCS(0), len(removals)))
	groups := workers * ((len(removals) + workers*maxSweepColumns - 1) / (workers * maxSweepColumns))
	size := (len(removals) + groups - 1) / groups
	groups = (len(removals) + size - 1) / size
	errs := make([]error, groups)
	var next atomic.Int64
	var wg sync.WaitGroup
	for range min(workers, groups) {
		wg.Go(func() {
			x := make([]float64, ch.n*size)
			for {
				g := int(next.Add(1)) - 1
				if g >= groups {
					return
				}
				lo, hi := g*size, min((g+1)*size, len(removals))
				m := hi - lo
				if errs[g] = ch.sweep(x[:ch.n*m], removals[lo:hi], full, p); errs[g] != nil {
					return
				}
				for j := range m {
					out[lo+j] = x[j]
				}
			}
		})
	}
	wg.Wait()
	if err := errors.Join(errs...); err != nil {
		return 0, nil, err
	}
	return p, out, nil
}

// sweep solves m = len(removals) systems together (a nil set: no removal)
// by Gauss–Seidel sweeps x_s ← (r_s + Σ_{t≠s} p(s,t) x_t) / (1 − p(s,s)),
// deepest states first, with x held at 0 on a system's removed states.
// x[s·m + j] receives system j's conversion probability from state s. The
// iteration matrix is non-negative and substochastic with spectral radius
// < 1 (every kept state reaches an absorbing state), so the sweeps converge,
// from 0 or from start (the solution without removal, n values, an upper
// bound) when it is given.
//
// The error of such sweeps soon shrinks by a steady factor ρ per sweep (one
// dominant mode; ρ ≈ 0.3 on journey data). Once a system's observed ratio of
// successive largest changes holds still, its iterate is extrapolated
// (Aitken's δ² process, applied to the whole vector):
// x ← x + (x − x_prev)·ρ/(1−ρ), which removes most of that mode and roughly
// halves the sweeps needed. A system stops when the estimated remaining
// error Δ·ρ/(1−ρ) is below relTol·ref, ref being the unremoved P when known,
// else its largest @entry value so far.
func (ch *chain) sweep(x []float64, removals [][]int32, start []float64, ref float64) error {
	n, m := ch.n, len(removals)
	x = x[:n*m]
	if start != nil {
		for i, v := range start {
			for j := range m {
				x[i*m+j] = v
			}
		}
	} else {
		clear(x)
	}
	// Per state, the systems in which it is removed (compressed rows).
	remStart := make([]int32, n+1)
	for _, set := range removals {
		for _, s := range set {
			remStart[s+1]++
		}
	}
	for i := range n {
		remStart[i+1] += remStart[i]
	}
	remSys := make([]int32, remStart[n])
	fill := slices.Clone(remStart[:n])
	for j, set := range removals {
		for _, s := range set {
			remSys[fill[s]] = int32(j)
			fill[s]++
			x[int(s)*m+j] = 0
		}
	}

	acc := make([]float64, m)
	diff := make([]float64, n*m) // change of the last sweep, per state and system
	delta := make([]float64, m)  // largest change of the last sweep, per system
	sys := make([]sweepProgress, m)
	for j := range sys {
		sys[j] = sweepProgress{prev: math.Inf(1), ref: ref}
	}
	var skip []bool // m == 1: the removed states
	if m == 1 && len(removals[0]) > 0 {
		skip = make([]bool, n)
		for _, s := range removals[0] {
			skip[s] = true
		}
	}
	for range maxSweeps {
		if m == 1 {
			delta[0] = ch.relaxOne(x, diff, skip)
		} else {
			ch.relaxMany(x, diff, delta, acc, remStart, remSys)
		}
		done := true
		for j := range sys {
			if start == nil {
				sys[j].ref = max(sys[j].ref, x[j], absFloor)
			}
			switch sys[j].step(delta[j]) {
			case sweepContinue:
				done = false
			case sweepExtrapolate:
				done = false
				f := sys[j].ratio / (1 - sys[j].ratio)
				for k := j; k < len(x); k += m {
					x[k] += diff[k] * f
				}
				sys[j].restart()
			}
		}
		if done {
			return nil
		}
	}
	return fmt.Errorf("markov: gauss-seidel over %d states did not converge in %d sweeps", n, maxSweeps)
}

// sweepProgress follows one system's convergence across sweeps.
type sweepProgress struct {
	ref       float64 // the probability the tolerance is relative to
	prev      float64 // largest change of the previous sweep; +Inf: none yet
	ratio     float64 // last ratio of successive largest changes; 0: none yet
	lastRatio float64
	steady    int // consecutive sweeps whose ratio held within ratioHold
	since     int // sweeps since the start or the last extrapolation
	converged bool
}

type sweepAction uint8

const (
	sweepContinue sweepAction = iota
	sweepDone
	sweepExtrapolate
)

// ratioHold is how closely successive change ratios must agree (relative)
// before an extrapolation; maxExtrapolationRatio keeps f = ρ/(1−ρ) modest.
const (
	ratioHold             = 0.02
	maxExtrapolationRatio = 0.95
)

// step records a sweep's largest change and says what to do next.
func (p *sweepProgress) step(delta float64) sweepAction {
	if p.converged {
		return sweepDone
	}
	p.since++
	if delta == 0 {
		p.converged = true
		return sweepDone
	}
	p.lastRatio, p.ratio = p.ratio, delta/p.prev
	p.prev = delta
	if p.lastRatio > 0 && math.Abs(p.ratio-p.lastRatio) <= ratioHold*p.ratio {
		p.steady++
	} else {
		p.steady = 0
	}
	rho := min(max(p.ratio, p.lastRatio), 1-1e-9)
	if p.since >= 3 && delta*rho/(1-rho) <= relTol*p.ref {
		p.converged = true
		return sweepDone
	}
	if p.steady >= 2 && p.ratio < maxExtrapolationRatio {
		return sweepExtrapolate
	}
	return sweepContinue
}

// restart forgets the ratio history after an extrapolation.
func (p *sweepProgress) restart() {
	p.prev, p.ratio, p.lastRatio, p.steady, p.since = math.Inf(1), 0, 0, 0, 0
}

// relaxOne is one Gauss–Seidel sweep of a single system (the states marked
// in skip stay 0); it returns the largest change.
func (ch *chain) relaxOne(x, diff []float64, skip []bool) float64 {
	rowStart, col, prob, conv, inv := ch.rowStart, ch.col, ch.prob, ch.conv, ch.invStay
	x = x[:len(conv)]
	diff = diff[:len(conv)]
	inv = inv[:len(conv)]
	var delta float64
	for i := len(conv) - 1; i >= 0; i-- {
		if skip != nil && skip[i] {
			continue
		}
		cols := col[rowStart[i]:rowStart[i+1]]
		ps := prob[rowStart[i]:rowStart[i+1]]
		ps = ps[:len(cols)]
		// Two partial sums halve the chain of dependent additions.
		a, b := conv[i], 0.0
		e := 0
		for ; e+2 <= len(cols); e += 2 {
			a += ps[e] * x[cols[e]]
			b += ps[e+1] * x[cols[e+1]]
		}
		if e < len(cols) {
			a += ps[e] * x[cols[e]]
		}
		nv := (a + b) * inv[i]
		d := nv - x[i]
		diff[i] = d
		if ad := math.Abs(d); ad > delta {
			delta = ad
		}
		x[i] = nv
	}
	return delta
}

// relaxMany is one Gauss–Seidel sweep of m = len(acc) systems stored side
// by side (x[s·m + j]); remSys[remStart[s]:remStart[s+1]] lists the systems
// in which state s is removed. Four systems at a time (then two, then one)
// keep their sums in registers while the row's edges are read. delta receives each system's
// largest change.
func (ch *chain) relaxMany(x, diff, delta, acc []float64, remStart, remSys []int32) {
	rowStart, col, prob, conv, inv := ch.rowStart, ch.col, ch.prob, ch.conv, ch.invStay
	m := len(acc)
	clear(delta)
	for i := len(conv) - 1; i >= 0; i-- {
		cols := col[rowStart[i]:rowStart[i+1]]
		ps := prob[rowStart[i]:rowStart[i+1]]
		ps = ps[:len(cols)]
		r := conv[i]
		j := 0
		for ; j+4 <= m; j += 4 {
			a0, a1, a2, a3 := r, r, r, r
			for e, c := range cols {
				p := ps[e]
				t := int(c)*m + j
				xt := x[t : t+4 : t+4]
				a0 += p * xt[0]
				a1 += p * xt[1]
				a2 += p * xt[2]
				a3 += p * xt[3]
			}
			acc[j], acc[j+1], acc[j+2], acc[j+3] = a0, a1, a2, a3
		}
		if j+2 <= m {
			a0, a1 := r, r
			for e, c := range cols {
				p := ps[e]
				t := int(c)*m + j
				xt := x[t : t+2 : t+2]
				a0 += p * xt[0]
				a1 += p * xt[1]
			}
			acc[j], acc[j+1] = a0, a1
			j += 2
		}
		if j < m {
			a := r
			for e, c := range cols {
				a += ps[e] * x[int(c)*m+j]
			}
			acc[j] = a
		}
		for _, j := range remSys[remStart[i]:remStart[i+1]] {
			acc[j] = 0
		}
		f := inv[i]
		xi := x[i*m : i*m+m]
		di := diff[i*m : i*m+m]
		di = di[:len(xi)]
		acc := acc[:len(xi)]
		delta := delta[:len(xi)]
		for j, v := range xi {
			nv := acc[j] * f
			d := nv - v
			di[j] = d
			if ad := math.Abs(d); ad > delta[j] {
				delta[j] = ad
			}
			xi[j] = nv
		}
	}
}
