package dashboard

import (
	"math"
	"slices"
	"testing"
	"time"
)

// TestNiceScale checks the loose labelling of Heckbert, "Nice numbers for
// graph labels" (Graphics Gems, 1990): range = nice(hi−lo), step =
// nice(range/(n−1), rounded), ticks from floor(lo/step)·step to
// ceil(hi/step)·step. Expected ticks worked by hand from those formulas
// [computed].
func TestNiceScale(t *testing.T) {
	tests := []struct {
		lo, hi float64
		n      int
		want   []float64
	}{
		{105, 543, 5, []float64{100, 200, 300, 400, 500, 600}}, // nice(438)=500, nice(125, round)=100
		{0, 1, 6, []float64{0, 0.2, 0.4, 0.6, 0.8, 1}},         // nice(1)=1, nice(0.2)=0.2
		{0, 0.87, 6, []float64{0, 0.2, 0.4, 0.6, 0.8, 1}},      // nice(0.87)=1
		{-0.1, 1.2, 6, []float64{-0.5, 0, 0.5, 1, 1.5}},        // nice(1.3)=2, nice(0.4, round)=0.5
		{0, 0, 6, []float64{0, 0.2, 0.4, 0.6, 0.8, 1}},         // empty range → [0, 1]
		{0, 150, 6, []float64{0, 50, 100, 150}},                // nice(150)=200, nice(40, round)=50
	}
	for _, tt := range tests {
		s := niceScale(tt.lo, tt.hi, tt.n, 100, 0)
		if !slices.Equal(s.ticks, tt.want) {
			t.Errorf("niceScale(%v, %v, %d) ticks = %v, want %v", tt.lo, tt.hi, tt.n, s.ticks, tt.want)
		}
		if got := s.at(s.lo); got != 100 {
			t.Errorf("at(lo) = %v, want 100", got)
		}
		if got := s.at(s.hi); got != 0 {
			t.Errorf("at(hi) = %v, want 0", got)
		}
	}
}

// TestContrast checks the WCAG 2.x relative luminance and contrast ratio
// (W3C WCAG 2.1, definitions of "relative luminance" and "contrast ratio"):
// black on white is 21:1 by definition; #777777 on white is 4.48:1, the
// value contrast checkers print for it (from memory, recomputed by hand:
// ((119/255+0.055)/1.055)^2.4 = 0.1845, 1.05/0.2345 = 4.478).
func TestContrast(t *testing.T) {
	tests := []struct {
		a, b string
		want float64
	}{
		{"#ffffff", "#000000", 21},
		{"#777777", "#ffffff", 4.478},
		{"#ffffff", "#ffffff", 1},
	}
	for _, tt := range tests {
		if got := contrast(tt.a, tt.b); math.Abs(got-tt.want) > 0.005 {
			t.Errorf("contrast(%s, %s) = %.4f, want %.3f", tt.a, tt.b, got, tt.want)
		}
	}
	// Text on every heat colour and the muted text colour meet WCAG AA for
	// normal text (4.5:1).
	for x := 0.0; x <= 1; x += 0.05 {
		fill := heatColor(x)
		if c := contrast(fill, inkOn(fill)); c < 4.5 {
			t.Errorf("text on %s (%.2f): contrast %.2f < 4.5", fill, x, c)
		}
	}
	if c := contrast(colorMuted, colorBackground); c < 4.5 {
		t.Errorf("muted text contrast %.2f < 4.5", c)
	}
}

// TestHeatColorEnds checks that the ramp starts and ends at its stops and
// that its luminance falls monotonically (order reads without hue).
func TestHeatColorEnds(t *testing.T) {
	if got := heatColor(0); got != "#eff3ff" {
		t.Errorf("heatColor(0) = %s, want #eff3ff", got)
	}
	if got := heatColor(1); got != "#08519c" {
		t.Errorf("heatColor(1) = %s, want #08519c", got)
	}
	prev := 2.0
	for x := 0.0; x <= 1.0001; x += 0.01 {
		l := relativeLuminance(heatColor(x))
		if l > prev {
			t.Errorf("luminance rises at %.2f", x)
		}
		prev = l
	}
}

func TestFormat(t *testing.T) {
	tests := []struct {
		u    Unit
		x    float64
		want string
	}{
		{Percent, 0.263, "26.3%"},
		{Percent, 0.0652, "6.52%"},
		{Percent, 0.0004, "0.04%"},
		{Percent, -0.1, "-10%"},
		{Percent, 0, "0%"},
		{Count, 63279, "63,279"},
		{Count, 1234567, "1,234,567"},
		{Number, 2.5, "2.5"},
		{Number, 138.4, "138"},
		{Number, -0.001, "0"},
		{Number, 1.005, "1"}, // 1.005 is 1.00499… in binary
	}
	for _, tt := range tests {
		if got := tt.u.format(tt.x); got != tt.want {
			t.Errorf("format(%v, %v) = %q, want %q", tt.u, tt.x, got, tt.want)
		}
	}
	ticks := []struct {
		u       Unit
		x, step float64
		want    string
	}{
		{Percent, 0.2, 0.2, "20%"},
		{Percent, 0.025, 0.005, "2.5%"},
		{Number, 1500, 500, "1,500"},
		{Number, 0.25, 0.05, "0.25"},
	}
	for _, tt := range ticks {
		if got := tt.u.tick(tt.x, tt.step); got != tt.want {
			t.Errorf("tick(%v, %v, %v) = %q, want %q", tt.u, tt.x, tt.step, got, tt.want)
		}
	}
}

func TestTimeTicks(t *testing.T) {
	t0 := time.Date(2026, 10, 8, 11, 50, 0, 0, time.UTC)
	tests := []struct {
		from, to time.Time
		max      int
		step     time.Duration
		first    string
		n        int
	}{
		{t0, t0.Add(3*time.Hour + 10*time.Minute), 8, 30 * time.Minute, "12:00", 7},
		{t0, t0.Add(10 * 24 * time.Hour), 14, 24 * time.Hour, "Oct 9", 10},
		{t0, t0.Add(30 * 24 * time.Hour), 6, 7 * 24 * time.Hour, "Oct 15", 4}, // weeks from the Unix epoch (Thursdays)
	}
	for _, tt := range tests {
		ticks, step := timeTicks(tt.from, tt.to, tt.max)
		if step != tt.step || len(ticks) != tt.n || timeLabel(ticks[0], step) != tt.first {
			t.Errorf("timeTicks(%s, %s, %d) = %d ticks from %s step %s, want %d from %s step %s",
				tt.from, tt.to, tt.max, len(ticks), timeLabel(ticks[0], step), step, tt.n, tt.first, tt.step)
		}
	}
}

func TestDurationLabels(t *testing.T) {
	for _, tt := range []struct {
		d           time.Duration
		label, unit string
	}{
		{30 * 24 * time.Hour, "30d", "30d"},
		{36 * time.Hour, "1d12h", "36h"},
		{90 * time.Minute, "1h30m", "1h30m"},
		{15 * time.Minute, "15m", "15m"},
		{10 * time.Minute, "10m", "10m"},
		{time.Hour, "1h", "1h"},
	} {
		if got := durationLabel(tt.d); got != tt.label {
			t.Errorf("durationLabel(%s) = %q, want %q", tt.d, got, tt.label)
		}
		if got := shortDuration(tt.d); got != tt.unit {
			t.Errorf("shortDuration(%s) = %q, want %q", tt.d, got, tt.unit)
		}
	}
}
