package credit

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"strings"
	"time"
)

// Model names a rule-based attribution model.
type Model uint8

// The rule-based models. Their weights are defined in the package overview.
const (
	FirstTouch Model = iota
	LastTouch
	LastMarketing
	Linear
	TimeDecay
	PositionBased
)

// RuleModels lists every rule-based model in a fixed order.
var RuleModels = []Model{FirstTouch, LastTouch, LastMarketing, Linear, TimeDecay, PositionBased}

var modelNames = [...]string{
	FirstTouch:    "first-touch",
	LastTouch:     "last-touch",
	LastMarketing: "last-marketing",
	Linear:        "linear",
	TimeDecay:     "time-decay",
	PositionBased: "position-based",
}

// String returns the model's name as used in configuration and queries.
func (m Model) String() string {
	if int(m) < len(modelNames) {
		return modelNames[m]
	}
	return fmt.Sprintf("model(%d)", uint8(m))
}

// ErrUnknownModel is returned (wrapped) by ParseModel for a name that is not
// one of the rule-based models.
var ErrUnknownModel = errors.New("unknown attribution model")

// ParseModel returns the model with the given name. The error lists the valid
// names.
func ParseModel(s string) (Model, error) {
	for i, name := range modelNames {
		if s == name {
			return Model(i), nil
		}
	}
	return 0, fmt.Errorf("%w %q (valid: %s)", ErrUnknownModel, s, strings.Join(modelNames[:], ", "))
}

// Defaults of Params (common practice, no published source; see doc.go).
const (
	DefaultHalfLife     = 7 * 24 * time.Hour
	DefaultFirstWeight  = 0.4
	DefaultMiddleWeight = 0.2
	DefaultLastWeight   = 0.4
	DefaultDirect       = "direct"
)

// Params are the tunable parts of the rule-based models. A zero field takes
// its default: HalfLife 0 means DefaultHalfLife, First = Middle = Last = 0
// means 0.4 / 0.2 / 0.4, Direct "" means "direct".
type Params struct {
	HalfLife            time.Duration // time-decay half-life (default 7 days)
	First, Middle, Last float64       // position-based weights (default 0.4, 0.2, 0.4)
	Direct              string        // the direct channel's name (default "direct")
}

// DefaultParams returns the documented defaults.
func DefaultParams() Params {
	return Params{
		HalfLife: DefaultHalfLife,
		First:    DefaultFirstWeight,
		Middle:   DefaultMiddleWeight,
		Last:     DefaultLastWeight,
		Direct:   DefaultDirect,
	}
}

// withDefaults fills the zero fields of p with their defaults.
func (p Params) withDefaults() Params {
	if p.HalfLife == 0 {
		p.HalfLife = DefaultHalfLife
	}
	if p.First == 0 && p.Middle == 0 && p.Last == 0 {
		p.First, p.Middle, p.Last = DefaultFirstWeight, DefaultMiddleWeight, DefaultLastWeight
	}
	if p.Direct == "" {
		p.Direct = DefaultDirect
	}
	return p
}

// Validate reports whether p, after its zero fields take their defaults, can
// be used by Weights: a positive half-life and finite, non-negative
// position weights.
func (p Params) Validate() error {
	p = p.withDefaults()
	if p.HalfLife < 0 {
		return fmt.Errorf("time-decay half-life %v: must be positive", p.HalfLife)
	}
	for _, w := range [...]struct {
		name  string
		value float64
	}{{"first", p.First}, {"middle", p.Middle}, {"last", p.Last}} {
		if math.IsNaN(w.value) || math.IsInf(w.value, 0) || w.value < 0 {
			return fmt.Errorf("position-based %s weight %v: must be finite and >= 0", w.name, w.value)
		}
	}
	return nil
}

// Touch is one eligible touch of a converting journey, given in time order.
type Touch struct {
	Channel string
	Time    time.Time
}

// resize returns dst[:n], reallocating only when its capacity is too small.
func resize[T any](dst []T, n int) []T {
	if cap(dst) < n {
		return make([]T, n)
	}
	return dst[:n]
}

// Weights fills dst[:len(touches)] with the model's weights (each >= 0,
// summing to 1) and returns it. conv is the conversion time: under time decay
// touch i weighs 2^(−Δt_i/h) before normalisation, Δt_i = conv − touch time.
// Each touch is a position: a channel touched three times gets three weights.
// Weights does not allocate when cap(dst) >= len(touches). An empty touches
// gives dst[:0]. p must pass Validate; m must be one of RuleModels (other
// values panic, as a programming error).
func Weights(m Model, p Params, touches []Touch, conv time.Time, dst []float64) []float64 {
	n := len(touches)
	dst = resize(dst, n)
	if n == 0 {
		return dst
	}
	p = p.withDefaults()
	clear(dst)
	switch m {
	case FirstTouch:
		dst[0] = 1
	case LastTouch:
		dst[n-1] = 1
	case LastMarketing:
		pick := n - 1
		for i := n - 1; i >= 0; i-- {
			if touches[i].Channel != p.Direct {
				pick = i
				break
			}
		}
		dst[pick] = 1
	case Linear:
		for i := range dst {
			dst[i] = 1 / float64(n)
		}
	case TimeDecay:
		timeDecayWeights(p.HalfLife, touches, conv, dst)
	case PositionBased:
		positionWeights(p, dst)
	default:
		panic(fmt.Sprintf("credit: Weights called with unknown model %d", uint8(m)))
	}
	return dst
}

// timeDecayWeights writes 2^(−Δt_i/h) normalised to sum 1. The exponents are
// taken relative to the smallest Δt, which leaves the normalised weights
// unchanged and keeps the largest raw weight at exactly 1 (no underflow).
func timeDecayWeights(h time.Duration, touches []Touch, conv time.Time, dst []float64) {
	minAge := conv.Sub(touches[0].Time)
	for _, t := range touches[1:] {
		minAge = min(minAge, conv.Sub(t.Time))
	}
	var sum float64
	for i, t := range touches {
		age := conv.Sub(t.Time) - minAge
		w := math.Exp2(-float64(age) / float64(h))
		dst[i] = w
		sum += w
	}
	for i := range dst {
		dst[i] /= sum
	}
}

// positionWeights writes the U-shaped weights: one touch gets all, two get
// half each, n >= 3 get First, Middle/(n−2) each, Last, normalised by
// First+Middle+Last.
func positionWeights(p Params, dst []float64) {
	n := len(dst)
	switch n {
	case 1:
		dst[0] = 1
		return
	case 2:
		dst[0], dst[1] = 0.5, 0.5
		return
	}
	total := p.First + p.Middle + p.Last
	middle := p.Middle / float64(n-2) / total
	for i := 1; i < n-1; i++ {
		dst[i] = middle
	}
	dst[0] = p.First / total
	dst[n-1] = p.Last / total
}

// smallApportion is the largest n for which Apportion keeps the remainders
// on the stack; longer weight lists use a heap slice and sort an index
// slice.
const smallApportion = 64

// snapRel is the relative distance under which a quota is taken to be the
// integer it is next to: quotas are computed in floating point, and an exact
// integer share must not lose a unit to rounding noise.
const snapRel = 1e-14

// quota returns the integer part and the fractional remainder of q,
// snapping values within rounding noise of an integer.
func quota(q float64) (int64, float64) {
	r := math.Round(q)
	tol := snapRel
	if q > 1 {
		tol *= q
	}
	if d := q - r; d <= tol && d >= -tol {
		return int64(r), 0
	}
	f := math.Floor(q)
	return int64(f), q - f
}

// Apportion splits total (integer units such as cents, >= 0) over the
// weights w (each >= 0, sum > 0) by the largest-remainder method: each index
// gets floor(total·w_i/Σw), and the units left over go one each to the
// largest fractional remainders, ties to the lower index. The result sums
// exactly to total. It is written into dst[:len(w)] and returned; no
// allocation when cap(dst) >= len(w) and len(w) <= 64. Shares are computed
// in float64, so they are exact for totals below 2^53. If Σw is not a
// positive finite number the weights are taken as equal. An empty w gives
// dst[:0].
func Apportion(total int64, w []float64, dst []int64) []int64 {
	n := len(w)
	dst = resize(dst, n)
	if n == 0 {
		return dst
	}
	var sum float64
	for _, x := range w {
		sum += x
	}
	equal := !(sum > 0) || math.IsInf(sum, 0)

	var fracStack [smallApportion]float64
	var frac []float64
	if n <= smallApportion {
		frac = fracStack[:n]
	} else {
		frac = make([]float64, n)
	}
	left := total
	if equal {
		q := float64(total) / float64(n)
		for i := range dst {
			dst[i], frac[i] = quota(q)
			left -= dst[i]
		}
	} else {
		scale := float64(total) / sum
		for i, x := range w {
			dst[i], frac[i] = quota(x * scale)
			left -= dst[i]
		}
	}
	if left == 0 {
		return dst
	}
	// Σ floor > total − n, so 0 < left < n unless rounding misbehaved; the
	// general cases below keep the sum exact whatever happened.
	for left >= int64(n) {
		for i := range dst {
			dst[i]++
		}
		left -= int64(n)
	}
	if left > 0 && n <= smallApportion {
		// Pick the largest remaining remainder left times; the strict
		// comparison keeps the lowest index among equals.
		var chosen uint64
		for range left {
			best := -1
			for i, f := range frac {
				if chosen&(1<<i) == 0 && (best < 0 || f > frac[best]) {
					best = i
				}
			}
			chosen |= 1 << best
			dst[best]++
		}
		return dst
	}
	order := make([]int, n)
	for i := range order {
		order[i] = i
	}
	slices.SortStableFunc(order, func(a, b int) int {
		switch {
		case frac[a] > frac[b]:
			return -1
		case frac[a] < frac[b]:
			return 1
		}
		return 0
	})
	if left > 0 {
		for _, i := range order[:left] {
			dst[i]++
		}
		return dst
	}
	// left < 0: take units back from the smallest remainders, last index
	// first, never below zero.
	for k := n - 1; left < 0; k-- {
		i := order[(k%n+n)%n]
		if dst[i] > 0 {
			dst[i]--
			left++
		}
	}
	return dst
}
