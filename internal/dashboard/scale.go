package dashboard

import (
	"math"
	"strconv"
	"strings"
	"time"
)

// Unit says how a chart's values are shown (data-value attributes always
// carry the raw value).
type Unit uint8

// Units.
const (
	// Number is a plain quantity such as credited conversions (fractional).
	Number Unit = iota
	// Percent is a fraction in [0, 1] (or beyond) shown as a percentage.
	Percent
	// Count is a whole number of things (sessions, transitions).
	Count
)

// format shows a value for a label or tooltip.
func (u Unit) format(x float64) string {
	switch u {
	case Percent:
		p := x * 100
		switch a := math.Abs(p); {
		case a == 0 || a >= 10:
			return group(p, 1) + "%"
		case a >= 0.1:
			return group(p, 2) + "%"
		default:
			return strconv.FormatFloat(p, 'g', 2, 64) + "%"
		}
	case Count:
		return group(x, 0)
	}
	if math.Abs(x) >= 100 {
		return group(x, 0)
	}
	return group(x, 2)
}

// tick shows an axis tick of a scale whose ticks are step apart.
func (u Unit) tick(x, step float64) string {
	if u == Percent {
		return group(x*100, decimals(step*100)) + "%"
	}
	return group(x, decimals(step))
}

// decimals is the number of decimals that tells ticks step apart.
func decimals(step float64) int {
	if step <= 0 || step >= 1 {
		return 0
	}
	return int(math.Ceil(-math.Log10(step) - 1e-9))
}

// group formats x with d decimals and a comma between thousands; trailing
// zeros after the point are dropped, and -0 prints as 0.
func group(x float64, d int) string {
	s := strconv.FormatFloat(x, 'f', d, 64)
	if strings.Contains(s, ".") {
		s = strings.TrimRight(strings.TrimRight(s, "0"), ".")
	}
	neg := strings.HasPrefix(s, "-")
	s = strings.TrimPrefix(s, "-")
	if s == "0" {
		neg = false
	}
	intPart, frac, hasFrac := strings.Cut(s, ".")
	var b strings.Builder
	if neg {
		b.WriteByte('-')
	}
	for i, r := range intPart {
		if i > 0 && (len(intPart)-i)%3 == 0 {
			b.WriteByte(',')
		}
		b.WriteRune(r)
	}
	if hasFrac {
		b.WriteByte('.')
		b.WriteString(frac)
	}
	return b.String()
}

// niceNum is Heckbert's "nice number" (Graphics Gems, 1990, "Nice numbers for
// graph labels"): a number of the form {1, 2, 5, 10}×10^k close to x,
// rounded when round is set, else the smallest such number >= x.
func niceNum(x float64, round bool) float64 {
	exp := math.Floor(math.Log10(x))
	f := x / math.Pow(10, exp)
	var nf float64
	if round {
		switch {
		case f < 1.5:
			nf = 1
		case f < 3:
			nf = 2
		case f < 7:
			nf = 5
		default:
			nf = 10
		}
	} else {
		switch {
		case f <= 1:
			nf = 1
		case f <= 2:
			nf = 2
		case f <= 5:
			nf = 5
		default:
			nf = 10
		}
	}
	return nf * math.Pow(10, exp)
}

// linearScale maps data values to pixel positions.
type linearScale struct {
	lo, hi float64 // data range (the outer ticks)
	p0, p1 float64 // pixel positions of lo and hi
	ticks  []float64
	step   float64
}

// niceScale covers [lo, hi] with about n "loose" ticks (Heckbert 1990:
// range = nice(hi−lo), step = nice(range/(n−1), rounded), ticks from
// floor(lo/step)·step to ceil(hi/step)·step). An empty range becomes [0, 1]
// or [lo−|lo|/2, hi+|hi|/2].
func niceScale(lo, hi float64, n int, p0, p1 float64) linearScale {
	if math.IsNaN(lo) || math.IsNaN(hi) || math.IsInf(lo, 0) || math.IsInf(hi, 0) {
		lo, hi = 0, 1
	}
	if hi < lo {
		lo, hi = hi, lo
	}
	if hi == lo {
		if lo == 0 {
			hi = 1
		} else {
			lo, hi = math.Min(0, lo-math.Abs(lo)/2), math.Max(0, hi+math.Abs(hi)/2)
		}
	}
	if n < 2 {
		n = 2
	}
	step := niceNum(niceNum(hi-lo, false)/float64(n-1), true)
	first := math.Floor(lo/step+1e-9) * step
	last := math.Ceil(hi/step-1e-9) * step
	s := linearScale{lo: first, hi: last, p0: p0, p1: p1, step: step}
	count := int(math.Round((last-first)/step)) + 1
	for i := range count {
		t := first + float64(i)*step
		// Snap away the float residue of the multiplication
		// (3 × 0.2 = 0.6000000000000001) by printing and reading back.
		t, _ = strconv.ParseFloat(strconv.FormatFloat(t, 'f', decimals(step)+1, 64), 64)
		if t == 0 {
			t = 0 // no -0
		}
		s.ticks = append(s.ticks, t)
	}
	return s
}

// at maps a data value to its pixel position.
func (s linearScale) at(x float64) float64 {
	if s.hi == s.lo {
		return s.p0
	}
	return s.p0 + (x-s.lo)/(s.hi-s.lo)*(s.p1-s.p0)
}

// timeSteps are the tick spacings a time axis may use.
var timeSteps = []time.Duration{
	5 * time.Minute, 10 * time.Minute, 15 * time.Minute, 30 * time.Minute,
	time.Hour, 2 * time.Hour, 3 * time.Hour, 6 * time.Hour, 12 * time.Hour,
	24 * time.Hour, 2 * 24 * time.Hour, 7 * 24 * time.Hour, 14 * 24 * time.Hour, 28 * 24 * time.Hour,
}

// timeTicks returns tick times at whole multiples of the smallest step (from
// timeSteps) that gives at most max ticks in [from, to], and the step. Ticks
// are aligned to UTC (Unix time multiples), so days start at 00:00 UTC.
func timeTicks(from, to time.Time, max int) ([]time.Time, time.Duration) {
	span := to.Sub(from)
	step := timeSteps[len(timeSteps)-1]
	for _, s := range timeSteps {
		if span/s+1 <= time.Duration(max) {
			step = s
			break
		}
	}
	sec := int64(step / time.Second)
	first := (from.Unix() + sec - 1) / sec * sec
	if from.Unix() < 0 && from.Unix()%sec != 0 {
		first = from.Unix() / sec * sec
	}
	var out []time.Time
	for t := first; t <= to.Unix(); t += sec {
		out = append(out, time.Unix(t, 0).UTC())
	}
	return out, step
}

// timeLabel shows a tick of a time axis whose ticks are step apart.
func timeLabel(t time.Time, step time.Duration) string {
	t = t.UTC()
	if step >= 24*time.Hour || (t.Hour() == 0 && t.Minute() == 0) {
		return t.Format("Jan 2")
	}
	return t.Format("15:04")
}
