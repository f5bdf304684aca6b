package credit

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// denseLimit is the largest number of transient states solved with gonum's
// dense LU decomposition; larger chains use Gauss–Seidel sweeps over the
// sparse rows. A Markov answer solves 1 + channels systems: at order 1 (a
// few dozen states) dense LU costs microseconds, while an order-3 chain over
// 20 channels has ~8000 states, where one dense LU (2/3·n³ ≈ 3·10¹¹ flops)
// would take minutes and the sparse sweeps take milliseconds.
const denseLimit = 160

// Gauss–Seidel stopping rule: stop when the estimated remaining error
// Δ·ρ/(1−ρ) (Δ the largest change of the last sweep, ρ the observed ratio of
// successive changes) is below relTol times the conversion probability.
const (
	relTol    = 1e-13
	maxSweeps = 200000
)

// solver solves (I − Q) x = r for a chain, optionally with some states
// removed (their x fixed at 0, every transition into them going to NULL).
type solver struct {
	ch    *chain
	dense bool
	a     *mat.Dense
	rhs   *mat.VecDense
	sol   *mat.VecDense
	lu    mat.LU
}

func newSolver(ch *chain, denseMax int) *solver {
	s := &solver{ch: ch, dense: ch.n <= denseMax}
	if s.dense {
		s.a = mat.NewDense(ch.n, ch.n, nil)
		s.rhs = mat.NewVecDense(ch.n, nil)
		s.sol = mat.NewVecDense(ch.n, nil)
	}
	return s
}

// solve writes the conversion probability of every transient state into x.
// removed (nil: none) marks the states sent to NULL. hint, when not nil, is
// a solution of the chain without removals; it is an upper bound that the
// iterative solver starts from.
func (s *solver) solve(x []float64, removed []bool, hint []float64) error {
	if s.dense {
		return s.solveDense(x, removed)
	}
	return s.solveSweeps(x, removed, hint)
}

// solveDense builds I − Q with removed states as identity rows (x = 0) and
// zero columns, and solves it with gonum's LU decomposition.
func (s *solver) solveDense(x []float64, removed []bool) error {
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

// solveSweeps runs Gauss–Seidel sweeps x_s ← (r_s + Σ_{t≠s} p(s,t) x_t) /
// (1 − p(s,s)), deepest states first. The iteration matrix is non-negative
// and substochastic with spectral radius < 1 (every kept state reaches an
// absorbing state), so the sweeps converge monotonically: upwards from 0,
// downwards from the unremoved solution.
func (s *solver) solveSweeps(x []float64, removed []bool, hint []float64) error {
	ch := s.ch
	if hint != nil {
		copy(x, hint)
	} else {
		clear(x)
	}
	if removed != nil {
		for i, r := range removed {
			if r {
				x[i] = 0
			}
		}
	}
	rowStart, col, prob := ch.rowStart, ch.col, ch.prob
	prev := math.Inf(1)
	for sweep := 1; sweep <= maxSweeps; sweep++ {
		var delta float64
		for i := ch.n - 1; i >= 0; i-- {
			if removed != nil && removed[i] {
				continue
			}
			acc := ch.conv[i]
			lo, hi := rowStart[i], rowStart[i+1]
			for e, t := range col[lo:hi] {
				acc += prob[int(lo)+e] * x[t]
			}
			v := acc / (1 - ch.stay[i])
			delta = max(delta, math.Abs(v-x[i]))
			x[i] = v
		}
		if delta == 0 {
			return nil
		}
		ref := x[0]
		if hint != nil {
			ref = hint[0]
		}
		rho := min(delta/prev, 1-1e-9)
		prev = delta
		if sweep > 2 && delta*rho/(1-rho) <= relTol*ref {
			return nil
		}
	}
	return fmt.Errorf("markov: gauss-seidel over %d states did not converge in %d sweeps", ch.n, maxSweeps)
}
