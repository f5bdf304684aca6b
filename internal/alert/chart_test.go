package alert

import (
	"math"
	"math/rand/v2"
	"testing"
)

// nistEWMAData is the NIST §6.3.2.4 EWMA example series
// (docs/references.md §5, published: NIST §6.3.2.4, as quoted in public repositories).
var nistEWMAData = []float64{
	52.0, 47.0, 53.0, 49.3, 50.1, 47.0, 51.0, 50.1, 51.2, 50.5,
	49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1,
}

const (
	nistLambda = 0.3
	nistTarget = 50.0
	nistSigma  = 2.0539
)

func TestEWMANIST(t *testing.T) {
	// docs/references.md §5, EWMA_0..20 to 2 dp as printed by NIST §6.3.2.4
	// [published: NIST §6.3.2.4 as quoted; reproduced exactly, computed].
	want := []float64{
		50.00, 50.60, 49.52, 50.56, 50.18, 50.16, 49.21, 49.75, 49.85, 50.26, 50.33,
		50.11, 49.36, 49.52, 50.05, 49.38, 49.92, 50.73, 51.23, 51.94, 51.99,
	}
	got := EWMA(nistEWMAData, nistLambda, nistTarget)
	if len(got) != len(want) {
		t.Fatalf("len(EWMA) = %d, want %d", len(got), len(want))
	}
	for i := range want {
		if math.Abs(got[i]-want[i]) > 0.005+1e-9 {
			t.Errorf("EWMA_%d = %.4f, want %.2f", i, got[i], want[i])
		}
	}
	// docs/references.md §5 [computed]: EWMA_20 = 162463260183264448489/3125000000000000000 exactly.
	if wantExact := 51.98824325864462; math.Abs(got[20]-wantExact) > 1e-9 {
		t.Errorf("EWMA_20 = %.12f, want %.12f", got[20], wantExact)
	}
}

func TestEWMALimitsNIST(t *testing.T) {
	lcl, ucl := EWMALimits(nistTarget, nistSigma, nistLambda, 3)
	// NIST §6.3.2.4 prints UCL = 52.5884, LCL = 47.4115 (docs/references.md §5, tolerance 1e-3).
	if math.Abs(ucl-52.5884) > 1e-3 || math.Abs(lcl-47.4115) > 1e-3 {
		t.Errorf("EWMALimits = (%.4f, %.4f), want (47.4115, 52.5884)", lcl, ucl)
	}
	// docs/references.md §5 [computed]: unrounded UCL = 52.588432, LCL = 47.411568.
	if math.Abs(ucl-52.588432) > 1e-6 || math.Abs(lcl-47.411568) > 1e-6 {
		t.Errorf("EWMALimits = (%.6f, %.6f), want (47.411568, 52.588432)", lcl, ucl)
	}
}

func TestEWMALimitsAtNIST(t *testing.T) {
	// docs/references.md §5, time-varying limits for the NIST example [computed], 4 dp.
	tests := []struct {
		step     int
		ucl, lcl float64
	}{
		{1, 51.8485, 48.1515},
		{2, 52.2564, 47.7436},
		{3, 52.4314, 47.5686},
		{5, 52.5516, 47.4484},
		{10, 52.5874, 47.4126},
	}
	for _, tt := range tests {
		lcl, ucl := EWMALimitsAt(nistTarget, nistSigma, nistLambda, 3, tt.step)
		if math.Abs(ucl-tt.ucl) > 5e-5+1e-9 || math.Abs(lcl-tt.lcl) > 5e-5+1e-9 {
			t.Errorf("EWMALimitsAt(t=%d) = (%.5f, %.5f), want (%.4f, %.4f)", tt.step, lcl, ucl, tt.lcl, tt.ucl)
		}
	}
	// docs/references.md §5: at t = 1 the factor is exactly λ, σ_z = 0.3·s.
	_, ucl1 := EWMALimitsAt(nistTarget, nistSigma, nistLambda, 3, 1)
	if got, want := ucl1-nistTarget, 3*nistLambda*nistSigma; math.Abs(got-want) > 1e-12 {
		t.Errorf("UCL_1 − target = %.12f, want 3·λ·s = %.12f", got, want)
	}
	// The exact limits approach the asymptotic ones (NIST §6.3.2.4).
	lcl, ucl := EWMALimits(nistTarget, nistSigma, nistLambda, 3)
	lcl200, ucl200 := EWMALimitsAt(nistTarget, nistSigma, nistLambda, 3, 200)
	if math.Abs(lcl200-lcl) > 1e-12 || math.Abs(ucl200-ucl) > 1e-12 {
		t.Errorf("EWMALimitsAt(t=200) = (%v, %v), want asymptotic (%v, %v)", lcl200, ucl200, lcl, ucl)
	}
	if l0, u0 := EWMALimitsAt(nistTarget, nistSigma, nistLambda, 3, 0); l0 != nistTarget || u0 != nistTarget {
		t.Errorf("EWMALimitsAt(t=0) = (%v, %v), want (%v, %v)", l0, u0, nistTarget, nistTarget)
	}
}

func TestEWMANISTNoPointOut(t *testing.T) {
	// docs/references.md §5: no point of the NIST example is out of control, under
	// either limit; the maximum EWMA is 51.988 and the minimum 49.212 [computed].
	zs := EWMA(nistEWMAData, nistLambda, nistTarget)
	lcl, ucl := EWMALimits(nistTarget, nistSigma, nistLambda, 3)
	var out []int
	for step := 1; step < len(zs); step++ {
		l, u := EWMALimitsAt(nistTarget, nistSigma, nistLambda, 3, step)
		if zs[step] > u || zs[step] < l || zs[step] > ucl || zs[step] < lcl {
			out = append(out, step)
		}
	}
	if len(out) != 0 {
		t.Errorf("points out of control = %v, want none", out)
	}
	lo, hi := zs[1], zs[1]
	for _, z := range zs[1:] {
		lo, hi = min(lo, z), max(hi, z)
	}
	if math.Abs(hi-51.988) > 5e-4 || math.Abs(lo-49.212) > 5e-4 {
		t.Errorf("EWMA range = [%.4f, %.4f], want [49.212, 51.988]", lo, hi)
	}
}

func TestEWMAClosedForm(t *testing.T) {
	// The recursion equals its closed form z_t = (1−λ)^t·z_0 + Σ_j λ(1−λ)^{t−j}·x_j
	// (NIST §6.3.2.4 expands EWMA this way), on random data.
	rng := rand.New(rand.NewPCG(1, 2))
	for range 20 {
		n := 1 + rng.IntN(40)
		xs := make([]float64, n)
		for i := range xs {
			xs[i] = rng.NormFloat64()*3 + 10
		}
		lambda, target := 0.05+0.9*rng.Float64(), rng.Float64()*20
		zs := EWMA(xs, lambda, target)
		for step := 0; step <= n; step++ {
			want := math.Pow(1-lambda, float64(step)) * target
			for j := 1; j <= step; j++ {
				want += lambda * math.Pow(1-lambda, float64(step-j)) * xs[j-1]
			}
			if math.Abs(zs[step]-want) > 1e-9 {
				t.Fatalf("λ=%v: z_%d = %v, closed form %v", lambda, step, zs[step], want)
			}
		}
	}
}

// wafer proportions of the NIST §6.3.3.2 p-chart example, 30 wafers of 50
// chips (docs/references.md §5, published: NIST §6.3.3.2, as transcribed in a public data file).
var waferProportions = []float64{
	0.24, 0.30, 0.16, 0.20, 0.08, 0.14, 0.32, 0.18, 0.28, 0.20,
	0.10, 0.12, 0.34, 0.24, 0.44, 0.16, 0.20, 0.10, 0.26, 0.22,
	0.40, 0.36, 0.48, 0.30, 0.18, 0.24, 0.14, 0.26, 0.18, 0.12,
}

func TestPChartNISTWafers(t *testing.T) {
	var defectives int64
	for _, p := range waferProportions {
		defectives += int64(math.Round(p * 50))
	}
	// docs/references.md §5 [computed]: total defectives 347, p̄ = 347/1500.
	if defectives != 347 {
		t.Fatalf("total defectives = %d, want 347", defectives)
	}
	pbar := float64(defectives) / 1500
	lcl, ucl := PChartLimits(pbar, 50, 3)
	// NIST §6.3.3.2 prints .0524 / .4102 ([from memory], consistent with [computed] 0.052428 / 0.410239).
	if math.Abs(lcl-0.0524) > 1e-4 || math.Abs(ucl-0.4102) > 1e-4 {
		t.Errorf("PChartLimits = (%.6f, %.6f), want (0.0524, 0.4102)", lcl, ucl)
	}
	if math.Abs(lcl-0.052428) > 1e-6 || math.Abs(ucl-0.410239) > 1e-6 {
		t.Errorf("PChartLimits = (%.6f, %.6f), want (0.052428, 0.410239)", lcl, ucl)
	}
	var out []int
	for i, p := range waferProportions {
		if p > ucl || p < lcl {
			out = append(out, i+1)
		}
	}
	// docs/references.md §5: samples 15 (0.44) and 23 (0.48) are above the UCL.
	if want := []int{15, 23}; !equalInts(out, want) {
		t.Errorf("samples out = %v, want %v", out, want)
	}
}

func TestPChartLimits(t *testing.T) {
	tests := []struct {
		name     string
		pbar     float64
		n        int64
		lcl, ucl float64
		tol      float64
	}{
		// docs/references.md §5, p-chart limits at p̄ = 0.10 for other n [computed], 3 dp.
		{"n=100", 0.10, 100, 0.010, 0.190, 5e-4},
		{"n=400", 0.10, 400, 0.055, 0.145, 5e-4},
		{"n=2500", 0.10, 2500, 0.082, 0.118, 5e-4},
		// Clipping (NIST §6.3.3.2 clips the LCL at 0): 0.01 ± 3·√(0.0099/10) = −0.0844 / 0.1044.
		{"clip low", 0.01, 10, 0, 0.01 + 3*math.Sqrt(0.0099/10), 1e-12},
		{"clip high", 0.99, 10, 0.99 - 3*math.Sqrt(0.0099/10), 1, 1e-12},
		{"no sessions", 0.2, 0, 0, 1, 0},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			lcl, ucl := PChartLimits(tt.pbar, tt.n, 3)
			if math.Abs(lcl-tt.lcl) > tt.tol || math.Abs(ucl-tt.ucl) > tt.tol {
				t.Errorf("PChartLimits(%v, %d, 3) = (%v, %v), want (%v, %v)", tt.pbar, tt.n, lcl, ucl, tt.lcl, tt.ucl)
			}
		})
	}
}

// nistCUSUMData is the NIST §6.3.2.3 CUSUM example (docs/references.md §5,
// published: NIST §6.3.2.3, as quoted in public repositories).
var nistCUSUMData = []float64{
	324.93, 324.68, 324.73, 324.35, 325.35, 325.23, 324.13, 324.53, 325.23, 324.60,
	324.63, 325.15, 328.33, 327.25, 327.83, 328.50, 326.68, 327.78, 326.88, 328.35,
}

func TestCUSUMNIST(t *testing.T) {
	hi, lo, first := CUSUM(nistCUSUMData, 325, 0.3175, 4.1959)
	// docs/references.md §5 [computed, exact decimals]: first signal at sample 14.
	if first != 14 {
		t.Errorf("first signal = %d, want 14", first)
	}
	// S_hi is 0 through sample 12 except 0.0325 at sample 5; S_hi(13) = 3.0125,
	// S_hi(14) = 4.9450, S_hi(20) = 19.0600.
	wantHi := map[int]float64{5: 0.0325, 13: 3.0125, 14: 4.9450, 20: 19.0600}
	for i := 1; i <= 12; i++ {
		if _, ok := wantHi[i]; !ok {
			wantHi[i] = 0
		}
	}
	for i, want := range wantHi {
		if math.Abs(hi[i-1]-want) > 1e-9 {
			t.Errorf("S_hi(%d) = %.6f, want %.4f", i, hi[i-1], want)
		}
	}
	// S_lo peaks at 0.7050 at sample 8.
	peak, at := 0.0, 0
	for i, v := range lo {
		if v > peak {
			peak, at = v, i+1
		}
	}
	if math.Abs(peak-0.7050) > 1e-9 || at != 8 {
		t.Errorf("S_lo peak = %.6f at %d, want 0.7050 at 8", peak, at)
	}
}

func TestCUSUMStandardisedSpike(t *testing.T) {
	// docs/references.md §5 spike example [computed]: standardised CUSUM with k = 0.5,
	// h = 4 over z = (p − 0.10)/0.015 for rates 0.10, 0.11, 0.09, 0.12, 0.14, 0.16.
	rates := []float64{0.10, 0.11, 0.09, 0.12, 0.14, 0.16}
	zs := make([]float64, len(rates))
	for i, p := range rates {
		zs[i] = (p - 0.10) / 0.015
	}
	hi, _, first := CUSUM(zs, 0, 0.5, 4)
	want := []float64{0, 1.0 / 6, 0, 5.0 / 6, 3.0, 6.5}
	for i := range want {
		if math.Abs(hi[i]-want[i]) > 1e-9 {
			t.Errorf("S_hi(%d) = %.6f, want %.4f", i+1, hi[i], want[i])
		}
	}
	if first != 6 {
		t.Errorf("first signal = %d, want 6", first)
	}
}

func TestWilsonNewcombe(t *testing.T) {
	// docs/references.md §5, Wilson 95 % intervals, z = 1.959964 [computed]; the
	// cases are Newcombe (1998)'s examples ([from memory] that his Table II prints
	// these values), 4 dp.
	tests := []struct {
		x, n   int64
		lo, hi float64
	}{
		{81, 263, 0.2553, 0.3662},
		{15, 148, 0.0624, 0.1605},
		{0, 20, 0.0000, 0.1611},
		{1, 29, 0.0061, 0.1718},
		{23, 60, 0.2709, 0.5098},
		{30, 200, 0.1071, 0.2061},
	}
	for _, tt := range tests {
		lo, hi := Wilson(tt.x, tt.n, 1.959964)
		if math.Abs(lo-tt.lo) > 5e-5+1e-12 || math.Abs(hi-tt.hi) > 5e-5+1e-12 {
			t.Errorf("Wilson(%d, %d) = (%.5f, %.5f), want (%.4f, %.4f)", tt.x, tt.n, lo, hi, tt.lo, tt.hi)
		}
	}
	// docs/references.md §5: with z = 1.96 exactly, 81/263 gives 0.255288 / 0.366211.
	if lo, hi := Wilson(81, 263, 1.96); math.Abs(lo-0.255288) > 5e-7 || math.Abs(hi-0.366211) > 5e-7 {
		t.Errorf("Wilson(81, 263, 1.96) = (%.7f, %.7f), want (0.255288, 0.366211)", lo, hi)
	}
	// docs/references.md §5 spike example: one-sided 95 % lower bound (z = 1.644854)
	// of 30/200 is 0.113155 > p0 = 0.10 [computed].
	if lo, _ := Wilson(30, 200, 1.644854); math.Abs(lo-0.113155) > 5e-7 {
		t.Errorf("Wilson(30, 200, 1.644854) lower = %.7f, want 0.113155", lo)
	}
}

func TestWilsonInvertsScoreTest(t *testing.T) {
	// The Wilson bounds are the p where the score statistic |p̂ − p|/√(p(1−p)/n)
	// equals z (Wilson 1927): check that defining property on random cases, and
	// the edge cases x = 0, x = n and n = 0.
	rng := rand.New(rand.NewPCG(3, 4))
	for range 200 {
		n := int64(1 + rng.IntN(5000))
		x := rng.Int64N(n + 1)
		z := 0.5 + 3*rng.Float64()
		lo, hi := Wilson(x, n, z)
		phat := float64(x) / float64(n)
		if !(0 <= lo && lo <= phat && phat <= hi && hi <= 1) {
			t.Fatalf("Wilson(%d, %d, %v) = (%v, %v) does not bracket p̂ = %v in [0, 1]", x, n, z, lo, hi, phat)
		}
		for _, p := range []float64{lo, hi} {
			if p == 0 || p == 1 {
				continue
			}
			score := math.Abs(phat-p) / math.Sqrt(p*(1-p)/float64(n))
			if math.Abs(score-z) > 1e-6*z {
				t.Fatalf("Wilson(%d, %d, %v): score at bound %v = %v, want z", x, n, z, p, score)
			}
		}
	}
	// Edge cases are exact by definition (doc comment of Wilson).
	if lo, _ := Wilson(0, 50, 1.959964); lo != 0 {
		t.Errorf("Wilson(0, 50) lower = %v, want 0", lo)
	}
	if _, hi := Wilson(50, 50, 1.959964); hi != 1 {
		t.Errorf("Wilson(50, 50) upper = %v, want 1", hi)
	}
	if lo, hi := Wilson(0, 0, 1.959964); lo != 0 || hi != 1 {
		t.Errorf("Wilson(0, 0) = (%v, %v), want (0, 1)", lo, hi)
	}
}

func equalInts(a, b []int) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}
