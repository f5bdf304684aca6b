package alert

import (
	"errors"
	"math"
	"math/rand/v2"
	"reflect"
	"strconv"
	"testing"
	"time"
)

var (
	day0 = time.Date(2025, 3, 1, 0, 0, 0, 0, time.UTC)
	step = 5 * time.Minute
)

// series builds contiguous 5-minute intervals from (sessions, abandons) pairs.
func series(counts ...[2]int64) []Interval {
	ivs := make([]Interval, len(counts))
	for i, c := range counts {
		ivs[i] = Interval{Start: day0.Add(time.Duration(i) * step), Sessions: c[0], Abandons: c[1]}
	}
	return ivs
}

func repeat(n int, c [2]int64) [][2]int64 {
	out := make([][2]int64, n)
	for i := range out {
		out[i] = c
	}
	return out
}

func concat(parts ...[][2]int64) [][2]int64 {
	var out [][2]int64
	for _, p := range parts {
		out = append(out, p...)
	}
	return out
}

func TestDetectSpikeExample(t *testing.T) {
	// docs/references.md §5, spike example [computed]: p0 = 0.10,
	// n = 400 per interval, abandons 40, 44, 36, 48, 56, 64, λ = 0.2, L = 3.
	ivs := series([2]int64{400, 40}, [2]int64{400, 44}, [2]int64{400, 36},
		[2]int64{400, 48}, [2]int64{400, 56}, [2]int64{400, 64})
	p := Params{Lambda: 0.2, L: 3, MinSessions: 100, Target: 0.10, CloseAfter: 2}
	points, alerts, err := Detect(ivs, p)
	if err != nil {
		t.Fatal(err)
	}
	// z_t = 1/10, 51/500, 249/2500, 324/3125, 3467/31250, 9434/78125.
	wantZ := []float64{1.0 / 10, 51.0 / 500, 249.0 / 2500, 324.0 / 3125, 3467.0 / 31250, 9434.0 / 78125}
	// Time-varying UCL_t = 0.109000, 0.111526, 0.112885, 0.113684, 0.114172, 0.114475 (6 dp).
	wantUCL := []float64{0.109000, 0.111526, 0.112885, 0.113684, 0.114172, 0.114475}
	for i, pt := range points {
		if math.Abs(pt.Statistic-wantZ[i]) > 1e-12 {
			t.Errorf("z_%d = %.9f, want %.9f", i+1, pt.Statistic, wantZ[i])
		}
		if math.Abs(pt.UCL-wantUCL[i]) > 5e-7 {
			t.Errorf("UCL_%d = %.7f, want %.6f", i+1, pt.UCL, wantUCL[i])
		}
		if !pt.Evaluated || pt.Baseline != 0.10 {
			t.Errorf("point %d: evaluated %v baseline %v, want true 0.10", i+1, pt.Evaluated, pt.Baseline)
		}
		// First signal at t = 6 (t = 5: 0.110944 < 0.114172).
		if want := i == 5; pt.Alerting != want {
			t.Errorf("point %d alerting = %v, want %v", i+1, pt.Alerting, want)
		}
	}
	want := []Alert{{Opened: ivs[5].Start, Rate: 0.16, Baseline: 0.10, Limit: points[5].UCL, Peak: 0.16}}
	if !reflect.DeepEqual(alerts, want) {
		t.Errorf("alerts = %+v, want %+v", alerts, want)
	}
	if math.Abs(alerts[0].Limit-0.114475) > 5e-7 {
		t.Errorf("alert limit = %.7f, want 0.114475", alerts[0].Limit)
	}
}

func TestDetectRollingBaselineJump(t *testing.T) {
	// Abandonment jumps from 10 % to 16 % for six intervals and returns to 10 %.
	// Expected values [computed] with an independent python3 script,
	// testdata/rolling_reference.py, using exact fractions for p0 and z and the
	// explicit variance sum (not the recursion), following the rules in doc.go:
	// Baseline = 12, MinSessions = 100, CloseAfter = 3, λ = 0.2, L = 3.
	counts := concat(repeat(24, [2]int64{400, 40}), repeat(6, [2]int64{400, 64}), repeat(20, [2]int64{400, 40}))
	ivs := series(counts...)
	p := Params{Lambda: 0.2, L: 3, MinSessions: 100, Baseline: 12, CloseAfter: 3}
	points, alerts, err := Detect(ivs, p)
	if err != nil {
		t.Fatal(err)
	}
	// Interval 0 has no history and is not evaluated; all others are.
	for i, pt := range points {
		if want := i > 0; pt.Evaluated != want {
			t.Errorf("point %d evaluated = %v, want %v", i, pt.Evaluated, want)
		}
	}
	// Interval 24 (first at 16 %): z = 0.112 <= UCL 0.1149998 — not alerting; it
	// joins the baseline, so interval 25 has p0 = 21/200 = 0.105, z = 0.1216 >
	// UCL 0.1203276: the chart first crosses in interval 25. Intervals 25..31
	// alert; 32, 33, 34 are quiet, so the alert closes after interval 34 and
	// Closed = the end of interval 31 = Start of interval 32.
	wantStep := []struct {
		i           int
		p0, z, ucl  float64
		wantAlerted bool
	}{
		{24, 0.1, 0.112, 0.11499983274347853, false},
		{25, 0.105, 0.1216, 0.12032756167366329, true},
		{26, 29.0 / 275, 0.12928, 0.12081138616279995, true},
		{29, 0.1075, 0.14427136, 0.12298737552495265, true},
		{31, 0.11, 0.1283336704, 0.1256444801751256, true},
		{32, 0.112, 0.12266693632, 0.12776831772657257, false},
		{34, 0.112, 0.1145068392448, 0.1277683206484441, false},
		{37, 0.1, 0.1074275016933376, 0.114999999494501, false},
	}
	for _, w := range wantStep {
		pt := points[w.i]
		if math.Abs(pt.Baseline-w.p0) > 1e-12 || math.Abs(pt.Statistic-w.z) > 1e-12 ||
			math.Abs(pt.UCL-w.ucl) > 1e-12 || pt.Alerting != w.wantAlerted {
			t.Errorf("point %d = p0 %v z %v ucl %v alerting %v, want p0 %v z %v ucl %v alerting %v",
				w.i, pt.Baseline, pt.Statistic, pt.UCL, pt.Alerting, w.p0, w.z, w.ucl, w.wantAlerted)
		}
	}
	var alerting []int
	for i, pt := range points {
		if pt.Alerting {
			alerting = append(alerting, i)
		}
	}
	if want := []int{25, 26, 27, 28, 29, 30, 31}; !equalInts(alerting, want) {
		t.Errorf("alerting intervals = %v, want %v", alerting, want)
	}
	want := []Alert{{
		Opened: ivs[25].Start, Closed: ivs[32].Start,
		Rate: 0.16, Baseline: 0.105, Limit: points[25].UCL, Peak: 0.16,
	}}
	if !reflect.DeepEqual(alerts, want) {
		t.Errorf("alerts = %+v, want %+v", alerts, want)
	}

	// The close is decided by the CloseAfter-th quiet interval (34): through
	// interval 33 the alert is still open.
	for _, tt := range []struct {
		upTo       int
		wantClosed time.Time
	}{
		{33, time.Time{}},
		{34, ivs[32].Start},
	} {
		_, got, err := Detect(ivs[:tt.upTo+1], p)
		if err != nil {
			t.Fatal(err)
		}
		if len(got) != 1 || !got[0].Closed.Equal(tt.wantClosed) {
			t.Errorf("through interval %d: alerts = %+v, want one with Closed %v", tt.upTo, got, tt.wantClosed)
		}
	}
}

func TestDetectSkippedIntervals(t *testing.T) {
	// Intervals below MinSessions carry the statistic and make no decision:
	// they neither count as quiet nor reset the quiet run.
	ivs := series(
		[2]int64{400, 40}, [2]int64{400, 40}, // 0, 1
		[2]int64{400, 80}, [2]int64{400, 80}, // 2, 3: alerting
		[2]int64{400, 0},  // 4: quiet 1 (z = 0.8·0.136 = 0.1088 < UCL)
		[2]int64{20, 20},  // 5: skipped (100 % of 20 sessions)
		[2]int64{0, 0},    // 6: skipped (empty)
		[2]int64{400, 20}, // 7: quiet 2
		[2]int64{400, 40}, // 8: quiet 3 -> closes
	)
	p := Params{Lambda: 0.2, L: 3, MinSessions: 100, Target: 0.10, CloseAfter: 3}
	points, alerts, err := Detect(ivs, p)
	if err != nil {
		t.Fatal(err)
	}
	for _, i := range []int{5, 6} {
		pt := points[i]
		if pt.Evaluated || pt.Alerting || pt.Statistic != points[4].Statistic || pt.UCL != points[4].UCL ||
			pt.Baseline != points[4].Baseline {
			t.Errorf("skipped point %d = %+v, want carried from point 4 %+v", i, pt, points[4])
		}
	}
	if points[5].Rate != 1 || points[6].Rate != 0 {
		t.Errorf("rates of skipped points = %v, %v, want 1, 0", points[5].Rate, points[6].Rate)
	}
	// z_7 continues from z_4: the skipped intervals do not decay it.
	if got, want := points[7].Statistic, 0.2*0.05+0.8*points[4].Statistic; math.Abs(got-want) > 1e-15 {
		t.Errorf("z_7 = %v, want λ·0.05 + (1−λ)·z_4 = %v", got, want)
	}
	var alerting []int
	for i, pt := range points {
		if pt.Alerting {
			alerting = append(alerting, i)
		}
	}
	if want := []int{2, 3}; !equalInts(alerting, want) {
		t.Fatalf("alerting intervals = %v, want %v", alerting, want)
	}
	want := []Alert{{Opened: ivs[2].Start, Closed: ivs[4].Start, Rate: 0.2, Baseline: 0.1, Limit: points[2].UCL, Peak: 0.2}}
	if !reflect.DeepEqual(alerts, want) {
		t.Errorf("alerts = %+v, want %+v", alerts, want)
	}
	// Through interval 7 only two quiet intervals have been seen (the skipped
	// ones do not count): still open.
	if _, open, _ := Detect(ivs[:8], p); len(open) != 1 || !open[0].Closed.IsZero() {
		t.Errorf("through interval 7: alerts = %+v, want one open alert", open)
	}
}

func TestDetectNoHistoryAndFloor(t *testing.T) {
	// Rolling baseline: the first interval has no history and is not evaluated.
	// A history with no abandons gives p0 = 0.5/N (doc.go floor), so the limit
	// stays above p0 and finite.
	ivs := series([2]int64{100, 0}, [2]int64{100, 0}, [2]int64{100, 0}, [2]int64{100, 1})
	p := Params{Lambda: 0.2, L: 3, MinSessions: 10, Baseline: 10, CloseAfter: 1}
	points, _, err := Detect(ivs, p)
	if err != nil {
		t.Fatal(err)
	}
	if points[0].Evaluated {
		t.Errorf("point 0 evaluated without history")
	}
	tests := []struct {
		i        int
		wantBase float64
	}{
		{1, 0.5 / 100},
		{2, 0.5 / 200},
		{3, 0.5 / 300},
	}
	for _, tt := range tests {
		pt := points[tt.i]
		if !pt.Evaluated || pt.Baseline != tt.wantBase || !(pt.UCL > pt.Baseline) || math.IsInf(pt.UCL, 0) {
			t.Errorf("point %d = %+v, want evaluated with baseline %v and a finite UCL above it", tt.i, pt, tt.wantBase)
		}
	}
	// With the floor, the statistic starts at p0 (not 0): z_1 = 0.8·p0 at interval 1.
	if got, want := points[1].Statistic, 0.8*0.005; math.Abs(got-want) > 1e-15 {
		t.Errorf("z at interval 1 = %v, want %v", got, want)
	}
}

func TestDetectConstantNMatchesNISTLimits(t *testing.T) {
	// With a fixed target and constant n, UCL_t equals the exact time-varying
	// limit of NIST §6.3.2.4 with s = √(p0(1−p0)/n) (doc.go).
	const p0, n = 0.07, 250
	rng := rand.New(rand.NewPCG(5, 6))
	counts := make([][2]int64, 40)
	for i := range counts {
		counts[i] = [2]int64{n, int64(rng.IntN(40))}
	}
	p := Params{Lambda: 0.25, L: 2.8, MinSessions: 1, Target: p0, CloseAfter: 2}
	points, _, err := Detect(series(counts...), p)
	if err != nil {
		t.Fatal(err)
	}
	s := math.Sqrt(p0 * (1 - p0) / n)
	for i, pt := range points {
		_, want := EWMALimitsAt(p0, s, p.Lambda, p.L, i+1)
		if math.Abs(pt.UCL-want) > 1e-12 {
			t.Errorf("UCL_%d = %v, EWMALimitsAt = %v", i+1, pt.UCL, want)
		}
	}
	// And the statistic is the plain EWMA of the rates started at p0.
	rates := make([]float64, len(points))
	for i, pt := range points {
		rates[i] = pt.Rate
	}
	zs := EWMA(rates, p.Lambda, p0)
	for i, pt := range points {
		if math.Abs(pt.Statistic-zs[i+1]) > 1e-15 {
			t.Errorf("z_%d = %v, EWMA = %v", i+1, pt.Statistic, zs[i+1])
		}
	}
}

// referenceDetect recomputes Detect from the definitions in doc.go without
// the recursions: the pool is rescanned for every interval, z and the
// variance are explicit sums over the evaluated intervals.
func referenceDetect(ivs []Interval, p Params) ([]Point, []Alert) {
	points := make([]Point, len(ivs))
	var alerts []Alert
	var evaluated []int
	var z0 float64
	open, quiet, last := -1, 0, 0
	for i, iv := range ivs {
		pt := Point{Start: iv.Start, Sessions: iv.Sessions, Abandons: iv.Abandons}
		if iv.Sessions > 0 {
			pt.Rate = float64(iv.Abandons) / float64(iv.Sessions)
		}
		p0, ok := p.Target, p.Target > 0
		if !ok {
			var a, n int64
			for j := max(0, i-p.Baseline); j < i; j++ {
				if ivs[j].Sessions >= p.MinSessions && !points[j].Alerting {
					a += ivs[j].Abandons
					n += ivs[j].Sessions
				}
			}
			if n > 0 {
				ok = true
				p0 = math.Min(math.Max(float64(a)/float64(n), 0.5/float64(n)), 1-0.5/float64(n))
			}
		}
		if iv.Sessions < p.MinSessions || !ok {
			if len(evaluated) > 0 {
				prev := points[evaluated[len(evaluated)-1]]
				pt.Statistic, pt.Baseline, pt.UCL = prev.Statistic, prev.Baseline, prev.UCL
			}
			points[i] = pt
			continue
		}
		if len(evaluated) == 0 {
			z0 = p0
		}
		evaluated = append(evaluated, i)
		k := len(evaluated)
		l := p.Lambda
		z := math.Pow(1-l, float64(k)) * z0
		var w float64
		for m, j := range evaluated {
			rate := float64(ivs[j].Abandons) / float64(ivs[j].Sessions)
			z += l * math.Pow(1-l, float64(k-1-m)) * rate
			w += l * l * math.Pow(1-l, 2*float64(k-1-m)) / float64(ivs[j].Sessions)
		}
		pt.Statistic, pt.Baseline, pt.Evaluated = z, p0, true
		pt.UCL = p0 + p.L*math.Sqrt(p0*(1-p0)*w)
		pt.Alerting = z > pt.UCL
		points[i] = pt
		if pt.Alerting {
			if open < 0 {
				alerts = append(alerts, Alert{Opened: iv.Start, Rate: pt.Rate, Baseline: p0, Limit: pt.UCL})
				open = len(alerts) - 1
			}
			alerts[open].Peak = math.Max(alerts[open].Peak, pt.Rate)
			quiet, last = 0, i
		} else if open >= 0 {
			if quiet++; quiet == p.CloseAfter {
				alerts[open].Closed = ivs[last+1].Start
				open = -1
			}
		}
	}
	return points, alerts
}

func TestDetectMatchesReference(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	for trial := range 60 {
		n := 1 + rng.IntN(150)
		counts := make([][2]int64, n)
		rate := 0.05 + 0.1*rng.Float64()
		for i := range counts {
			if rng.IntN(20) == 0 {
				rate = 0.05 + 0.2*rng.Float64() // level shift
			}
			s := int64(rng.IntN(600))
			a := int64(0)
			for range s {
				if rng.Float64() < rate {
					a++
				}
			}
			counts[i] = [2]int64{s, a}
		}
		p := Params{
			Lambda: 0.1 + 0.3*rng.Float64(), L: 2 + rng.Float64(), MinSessions: int64(1 + rng.IntN(200)),
			Baseline: 1 + rng.IntN(30), CloseAfter: 1 + rng.IntN(4),
		}
		if trial%3 == 0 {
			p.Target = 0.1
		}
		ivs := series(counts...)
		gotPoints, gotAlerts, err := Detect(ivs, p)
		if err != nil {
			t.Fatal(err)
		}
		wantPoints, wantAlerts := referenceDetect(ivs, p)
		for i := range wantPoints {
			g, w := gotPoints[i], wantPoints[i]
			if g.Evaluated != w.Evaluated || g.Alerting != w.Alerting || g.Rate != w.Rate ||
				math.Abs(g.Statistic-w.Statistic) > 1e-12 || math.Abs(g.UCL-w.UCL) > 1e-12 ||
				math.Abs(g.Baseline-w.Baseline) > 1e-12 {
				t.Fatalf("trial %d params %+v point %d = %+v, reference %+v", trial, p, i, g, w)
			}
		}
		if len(gotAlerts) != len(wantAlerts) {
			t.Fatalf("trial %d: %d alerts, reference %d", trial, len(gotAlerts), len(wantAlerts))
		}
		for i := range wantAlerts {
			g, w := gotAlerts[i], wantAlerts[i]
			if !g.Opened.Equal(w.Opened) || !g.Closed.Equal(w.Closed) || g.Rate != w.Rate || g.Peak != w.Peak ||
				math.Abs(g.Baseline-w.Baseline) > 1e-12 || math.Abs(g.Limit-w.Limit) > 1e-12 {
				t.Fatalf("trial %d alert %d = %+v, reference %+v", trial, i, g, w)
			}
			if g.Peak < g.Rate || !(g.Limit > g.Baseline) {
				t.Fatalf("trial %d alert %d = %+v breaks Peak >= Rate or Limit > Baseline", trial, i, g)
			}
		}
		again, againAlerts, _ := Detect(ivs, p)
		if !reflect.DeepEqual(again, gotPoints) || !reflect.DeepEqual(againAlerts, gotAlerts) {
			t.Fatalf("trial %d: second run differs", trial)
		}
	}
}

func TestParamsValidate(t *testing.T) {
	valid := DefaultParams()
	if err := valid.Validate(); err != nil {
		t.Fatalf("DefaultParams().Validate() = %v", err)
	}
	fixed := valid
	fixed.Target, fixed.Baseline = 0.1, 0
	if err := fixed.Validate(); err != nil {
		t.Errorf("fixed target without baseline window: %v, want nil", err)
	}
	tests := []struct {
		name   string
		modify func(*Params)
	}{
		{"lambda 0", func(p *Params) { p.Lambda = 0 }},
		{"lambda above 1", func(p *Params) { p.Lambda = 1.5 }},
		{"lambda NaN", func(p *Params) { p.Lambda = math.NaN() }},
		{"L 0", func(p *Params) { p.L = 0 }},
		{"L infinite", func(p *Params) { p.L = math.Inf(1) }},
		{"min sessions 0", func(p *Params) { p.MinSessions = 0 }},
		{"target negative", func(p *Params) { p.Target = -0.1 }},
		{"target 1", func(p *Params) { p.Target = 1 }},
		{"rolling without window", func(p *Params) { p.Baseline = 0 }},
		{"close after 0", func(p *Params) { p.CloseAfter = 0 }},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			p := DefaultParams()
			tt.modify(&p)
			if err := p.Validate(); !errors.Is(err, ErrParams) {
				t.Errorf("Validate() = %v, want ErrParams", err)
			}
			if _, _, err := Detect(series([2]int64{100, 10}), p); !errors.Is(err, ErrParams) {
				t.Errorf("Detect() error = %v, want ErrParams", err)
			}
		})
	}
}

func TestDetectRejectsBadIntervals(t *testing.T) {
	ok := series([2]int64{100, 10}, [2]int64{100, 10})
	tests := []struct {
		name string
		ivs  []Interval
	}{
		{"abandons above sessions", series([2]int64{100, 10}, [2]int64{10, 11})},
		{"negative sessions", series([2]int64{-1, 0})},
		{"negative abandons", series([2]int64{10, -1})},
		{"same start", []Interval{ok[0], ok[0]}},
		{"out of order", []Interval{ok[1], ok[0]}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if _, _, err := Detect(tt.ivs, DefaultParams()); !errors.Is(err, ErrIntervals) {
				t.Errorf("Detect() error = %v, want ErrIntervals", err)
			}
		})
	}
	points, alerts, err := Detect(nil, DefaultParams())
	if err != nil || len(points) != 0 || len(alerts) != 0 {
		t.Errorf("Detect(nil) = %v, %v, %v, want empty and nil error", points, alerts, err)
	}
}

func BenchmarkDetect(b *testing.B) {
	for _, n := range []int{2016, 8064} {
		b.Run("intervals="+strconv.Itoa(n), func(b *testing.B) {
			rng := rand.New(rand.NewPCG(9, 10))
			counts := make([][2]int64, n)
			for i := range counts {
				s := int64(200 + rng.IntN(400))
				counts[i] = [2]int64{s, s / 10}
			}
			ivs := series(counts...)
			p := DefaultParams()
			b.ReportAllocs()
			for b.Loop() {
				if _, _, err := Detect(ivs, p); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "intervals/s")
		})
	}
}
