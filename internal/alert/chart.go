package alert

import "math"

// EWMA returns the exponentially weighted moving average z_0..z_n of the data
// x_1..x_n, where z_0 = target and
//
//	z_t = λ·x_t + (1−λ)·z_{t−1}
//
// (Roberts 1959; NIST/SEMATECH e-Handbook §6.3.2.4). The result has
// len(xs)+1 elements; element t is z_t.
func EWMA(xs []float64, lambda, target float64) []float64 {
	zs := make([]float64, len(xs)+1)
	zs[0] = target
	for i, x := range xs {
		zs[i+1] = lambda*x + (1-lambda)*zs[i]
	}
	return zs
}

// EWMALimits returns the asymptotic control limits of an EWMA chart,
//
//	target ± L·s·√(λ/(2−λ))
//
// where s is the standard deviation of one observation (NIST §6.3.2.4).
func EWMALimits(target, s, lambda, L float64) (lcl, ucl float64) {
	half := L * s * math.Sqrt(lambda/(2-lambda))
	return target - half, target + half
}

// EWMALimitsAt returns the exact control limits of an EWMA chart after t
// observations,
//
//	target ± L·s·√(λ/(2−λ)·(1−(1−λ)^{2t}))
//
// which start at target ± L·s·λ for t = 1 and approach EWMALimits as t grows.
// t <= 0 gives (target, target): z_0 is the target itself and has no
// variance.
func EWMALimitsAt(target, s, lambda, L float64, t int) (lcl, ucl float64) {
	if t <= 0 {
		return target, target
	}
	half := L * s * math.Sqrt(lambda/(2-lambda)*(1-math.Pow(1-lambda, 2*float64(t))))
	return target - half, target + half
}

// PChartLimits returns the limits of a proportions (p) chart for a sample of
// n units around the centre line pbar,
//
//	pbar ± L·√(pbar(1−pbar)/n)
//
// with the lower limit clipped at 0 and the upper at 1 (NIST §6.3.3.2, where
// L = 3). With n <= 0 there is no information and the limits are (0, 1).
func PChartLimits(pbar float64, n int64, L float64) (lcl, ucl float64) {
	if n <= 0 {
		return 0, 1
	}
	half := L * math.Sqrt(pbar*(1-pbar)/float64(n))
	return math.Max(0, pbar-half), math.Min(1, pbar+half)
}

// CUSUM runs the tabular CUSUM of NIST §6.3.2.3 (Page 1954) over xs:
//
//	S_hi(i) = max(0, S_hi(i−1) + x_i − μ0 − k)
//	S_lo(i) = max(0, S_lo(i−1) + μ0 − k − x_i),   S_hi(0) = S_lo(0) = 0.
//
// hi[i-1] and lo[i-1] hold S_hi(i) and S_lo(i) for i = 1..len(xs).
// firstSignal is the first i (1-based) where either sum exceeds h
// (strictly), or 0 if none does.
func CUSUM(xs []float64, mu0, k, h float64) (hi, lo []float64, firstSignal int) {
	hi = make([]float64, len(xs))
	lo = make([]float64, len(xs))
	var sHi, sLo float64
	for i, x := range xs {
		sHi = math.Max(0, sHi+x-mu0-k)
		sLo = math.Max(0, sLo+mu0-k-x)
		hi[i], lo[i] = sHi, sLo
		if firstSignal == 0 && (sHi > h || sLo > h) {
			firstSignal = i + 1
		}
	}
	return hi, lo, firstSignal
}

// Wilson returns the Wilson score interval (Wilson 1927) for x successes out
// of n trials at standard-normal quantile z (1.959964 for a two-sided 95 %
// interval, 1.644854 for a one-sided 95 % bound). With p̂ = x/n:
//
//	(p̂ + z²/(2n) ± z·√(p̂(1−p̂)/n + z²/(4n²))) / (1 + z²/n)
//
// The bounds are clipped to [0, 1]; x = 0 gives lo = 0 and x = n gives
// hi = 1 exactly. n <= 0 gives (0, 1). x is clamped to [0, n].
func Wilson(x, n int64, z float64) (lo, hi float64) {
	if n <= 0 {
		return 0, 1
	}
	x = min(max(x, 0), n)
	nf := float64(n)
	p := float64(x) / nf
	z2 := z * z
	centre := p + z2/(2*nf)
	half := z * math.Sqrt(p*(1-p)/nf+z2/(4*nf*nf))
	den := 1 + z2/nf
	lo = math.Max(0, (centre-half)/den)
	hi = math.Min(1, (centre+half)/den)
	if x == 0 {
		lo = 0
	}
	if x == n {
		hi = 1
	}
	return lo, hi
}
