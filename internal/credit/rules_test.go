package credit

import (
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
	"time"
)

const day = 24 * time.Hour

var conv = time.Date(2026, 3, 10, 12, 0, 0, 0, time.UTC)

// touchesAgo builds touches on the given channels, ages[i] before conv.
func touchesAgo(channels []string, ages []time.Duration) []Touch {
	ts := make([]Touch, len(channels))
	for i, c := range channels {
		ts[i] = Touch{Channel: c, Time: conv.Add(-ages[i])}
	}
	return ts
}

func TestModelNames(t *testing.T) {
	want := []string{"first-touch", "last-touch", "last-marketing", "linear", "time-decay", "position-based"}
	for i, m := range RuleModels {
		if got := m.String(); got != want[i] {
			t.Errorf("%d.String() = %q, want %q", m, got, want[i])
		}
		got, err := ParseModel(want[i])
		if err != nil || got != m {
			t.Errorf("ParseModel(%q) = %v, %v; want %v", want[i], got, err, m)
		}
	}
	_, err := ParseModel("last-click")
	if !errors.Is(err, ErrUnknownModel) {
		t.Fatalf("ParseModel(unknown) error = %v, want ErrUnknownModel", err)
	}
	for _, name := range want {
		if !strings.Contains(err.Error(), name) {
			t.Errorf("error %q does not list %q", err, name)
		}
	}
	if got := Model(42).String(); got != "model(42)" {
		t.Errorf("Model(42).String() = %q", got)
	}
}

// docs/references.md §2, worked example V = 50.00 with five touches
// [computed]; the rules are common practice (issue 2 item 6).
func TestWeightsFiveTouches(t *testing.T) {
	touches := touchesAgo(
		[]string{"display", "social", "email", "paid_search", "direct"},
		[]time.Duration{28 * day, 21 * day, 14 * day, 7 * day, 0})
	const value = 50.0
	tests := []struct {
		model Model
		want  []float64
	}{
		{FirstTouch, []float64{50, 0, 0, 0, 0}},
		{LastTouch, []float64{0, 0, 0, 0, 50}},
		{LastMarketing, []float64{0, 0, 0, 50, 0}},
		{Linear, []float64{10, 10, 10, 10, 10}},
		{TimeDecay, []float64{50.0 / 31, 100.0 / 31, 200.0 / 31, 400.0 / 31, 800.0 / 31}},
		{PositionBased, []float64{20, 10.0 / 3, 10.0 / 3, 10.0 / 3, 20}},
	}
	for _, tt := range tests {
		t.Run(tt.model.String(), func(t *testing.T) {
			w := Weights(tt.model, DefaultParams(), touches, conv, nil)
			got := make([]float64, len(w))
			for i := range w {
				got[i] = w[i] * value
			}
			if !nearSlice(got, tt.want, 1e-12) {
				t.Errorf("credits = %v, want %v", got, tt.want)
			}
		})
	}
}

// docs/references.md §2: position-based 40/20/40 applied to 50 for n = 1..5
// [computed; split ratios common practice].
func TestPositionBasedLengths(t *testing.T) {
	tests := []struct {
		n    int
		want []float64
	}{
		{1, []float64{50}},
		{2, []float64{25, 25}},
		{3, []float64{20, 10, 20}},
		{4, []float64{20, 5, 5, 20}},
		{5, []float64{20, 10.0 / 3, 10.0 / 3, 10.0 / 3, 20}},
	}
	for _, tt := range tests {
		channels := make([]string, tt.n)
		ages := make([]time.Duration, tt.n)
		for i := range channels {
			channels[i] = "email"
			ages[i] = time.Duration(tt.n-i) * day
		}
		// Zero Params mean the defaults, 0.4 / 0.2 / 0.4.
		for _, p := range []Params{{}, DefaultParams()} {
			w := Weights(PositionBased, p, touchesAgo(channels, ages), conv, nil)
			got := make([]float64, len(w))
			for i := range w {
				got[i] = 50 * w[i]
			}
			if !nearSlice(got, tt.want, 1e-12) {
				t.Errorf("n=%d params %+v: credits %v, want %v", tt.n, p, got, tt.want)
			}
		}
	}
}

// Custom position weights are normalised by their sum; two touches always
// split in half (issue 2 item 6).
func TestPositionBasedCustomWeights(t *testing.T) {
	p := Params{First: 0.3, Middle: 0.4, Last: 0.3}
	touches := touchesAgo([]string{"a", "b", "c", "d"}, []time.Duration{4 * day, 3 * day, 2 * day, day})
	if got, want := Weights(PositionBased, p, touches, conv, nil), []float64{0.3, 0.2, 0.2, 0.3}; !nearSlice(got, want, 1e-12) {
		t.Errorf("weights = %v, want %v", got, want)
	}
	p = Params{First: 1, Middle: 1, Last: 2}
	if got, want := Weights(PositionBased, p, touches[:3], conv, nil), []float64{0.25, 0.25, 0.5}; !nearSlice(got, want, 1e-12) {
		t.Errorf("weights = %v, want %v", got, want)
	}
	if got, want := Weights(PositionBased, p, touches[:2], conv, nil), []float64{0.5, 0.5}; !nearSlice(got, want, 1e-12) {
		t.Errorf("two touches: weights = %v, want %v", got, want)
	}
}

// docs/references.md §2: time decay with Δt not a multiple of h: Δt = 10.5 d,
// 3.5 d, 0 with h = 7 d give 8.578644, 17.157288, 24.264069 of 50
// [computed; tolerance 1e-6 as given].
func TestTimeDecayNonMultiple(t *testing.T) {
	touches := touchesAgo([]string{"a", "b", "c"}, []time.Duration{10*day + 12*time.Hour, 3*day + 12*time.Hour, 0})
	w := Weights(TimeDecay, Params{HalfLife: 7 * day}, touches, conv, nil)
	want := []float64{8.578644, 17.157288, 24.264069}
	for i := range w {
		if got := 50 * w[i]; math.Abs(got-want[i]) > 1e-6 {
			t.Errorf("touch %d: credit %.9f, want %.6f", i, got, want[i])
		}
	}
}

// Time decay is relative: a half-life far shorter than the gaps must not
// underflow to 0/0, and equal ages share equally.
func TestTimeDecayExtremes(t *testing.T) {
	touches := touchesAgo([]string{"a", "b", "c"}, []time.Duration{365 * day, 30 * day, 30 * day})
	w := Weights(TimeDecay, Params{HalfLife: time.Minute}, touches, conv, nil)
	if want := []float64{0, 0.5, 0.5}; !nearSlice(w, want, 1e-12) {
		t.Errorf("weights = %v, want %v", w, want)
	}
}

// Last-marketing: the last touch whose channel is not the direct channel;
// if all are direct, the last (issue 2 item 6; docs/references.md §2).
func TestLastMarketing(t *testing.T) {
	tests := []struct {
		name     string
		channels []string
		direct   string
		want     int
	}{
		{"direct last", []string{"email", "social", "direct"}, "", 1},
		{"directs after", []string{"email", "direct", "direct"}, "", 0},
		{"no direct", []string{"email", "social"}, "", 1},
		{"all direct", []string{"direct", "direct", "direct"}, "", 2},
		{"custom direct name", []string{"email", "(none)"}, "(none)", 0},
		{"default name not special when renamed", []string{"email", "direct"}, "(none)", 1},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			ages := make([]time.Duration, len(tt.channels))
			for i := range ages {
				ages[i] = time.Duration(len(ages)-i) * time.Hour
			}
			w := Weights(LastMarketing, Params{Direct: tt.direct}, touchesAgo(tt.channels, ages), conv, nil)
			want := make([]float64, len(tt.channels))
			want[tt.want] = 1
			if !slices.Equal(w, want) {
				t.Errorf("weights = %v, want %v", w, want)
			}
		})
	}
}

func TestWeightsEmpty(t *testing.T) {
	dst := make([]float64, 3, 8)
	for _, m := range RuleModels {
		if got := Weights(m, Params{}, nil, conv, dst); len(got) != 0 || cap(got) != 8 {
			t.Errorf("%v: got len %d cap %d, want dst[:0]", m, len(got), cap(got))
		}
	}
}

func TestParamsValidate(t *testing.T) {
	tests := []struct {
		name string
		p    Params
		ok   bool
	}{
		{"zero means defaults", Params{}, true},
		{"defaults", DefaultParams(), true},
		{"negative half-life", Params{HalfLife: -time.Hour}, false},
		{"negative weight", Params{First: -0.1, Middle: 0.6, Last: 0.5}, false},
		{"NaN weight", Params{First: math.NaN()}, false},
		{"infinite weight", Params{Last: math.Inf(1)}, false},
		{"middle zero", Params{First: 0.5, Last: 0.5}, true},
	}
	for _, tt := range tests {
		if err := tt.p.Validate(); (err == nil) != tt.ok {
			t.Errorf("%s: Validate() = %v, want ok=%v", tt.name, err, tt.ok)
		}
	}
}

// docs/references.md §2 "Rounding to cents" [computed]: largest remainder, ties
// to the earlier touch (common practice, no source).
func TestApportion(t *testing.T) {
	third := []float64{1.0 / 3, 1.0 / 3, 1.0 / 3}
	seventh := make([]float64, 7)
	for i := range seventh {
		seventh[i] = 1.0 / 7
	}
	decay := Weights(TimeDecay, DefaultParams(), touchesAgo(
		[]string{"display", "social", "email", "paid_search", "direct"},
		[]time.Duration{28 * day, 21 * day, 14 * day, 7 * day, 0}), conv, nil)
	tests := []struct {
		name  string
		total int64
		w     []float64
		want  []int64
	}{
		{"50.00 linear over 3", 5000, third, []int64{1667, 1667, 1666}},
		{"100.00 over 7", 10000, seventh, []int64{1429, 1429, 1429, 1429, 1428, 1428, 1428}},
		{"time-decay row", 5000, decay, []int64{161, 323, 645, 1290, 2581}},
		// The remaining rows follow from the stated rule itself.
		{"zero total", 0, third, []int64{0, 0, 0}},
		{"tie goes to the lower index", 1, []float64{0.5, 0.5}, []int64{1, 0}},
		{"unnormalised weights", 7, []float64{2, 1, 1}, []int64{3, 2, 2}},
		{"zero weight gets nothing", 3, []float64{0, 1, 1}, []int64{0, 2, 1}},
		{"exact shares stay exact", 100, []float64{0.4, 0.2, 0.4}, []int64{40, 20, 40}},
		{"empty", 5, nil, []int64{}},
		{"all-zero weights split equally", 5, []float64{0, 0}, []int64{3, 2}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if got := Apportion(tt.total, tt.w, nil); !slices.Equal(got, tt.want) {
				t.Errorf("Apportion(%d, %v) = %v, want %v", tt.total, tt.w, got, tt.want)
			}
		})
	}
}

// Over 64 weights Apportion sorts instead of ranking on the stack; the rule
// is the same: 1050 over 100 equal weights gives 11 to the first 50.
func TestApportionLong(t *testing.T) {
	w := make([]float64, 100)
	for i := range w {
		w[i] = 1
	}
	got := Apportion(1050, w, nil)
	for i, v := range got {
		want := int64(10)
		if i < 50 {
			want = 11
		}
		if v != want {
			t.Fatalf("index %d got %d, want %d (all: %v)", i, v, want, got)
		}
	}
}

// Property: on random touches every model's weights are >= 0 and sum to 1,
// and Apportion sums exactly and gives each index floor or ceil of its exact
// share.
func TestWeightsApportionProperties(t *testing.T) {
	r := rand.New(rand.NewPCG(2, 6))
	channels := []string{"direct", "email", "social", "display", "paid_search"}
	var w []float64
	var cents []int64
	for trial := range 2000 {
		n := 1 + r.IntN(40)
		touches := make([]Touch, n)
		at := conv.Add(-time.Duration(r.Int64N(int64(60 * day))))
		for i := range touches {
			touches[i] = Touch{Channel: channels[r.IntN(len(channels))], Time: at}
			at = at.Add(time.Duration(r.Int64N(int64(conv.Sub(at)) + 1)))
		}
		p := Params{HalfLife: time.Duration(1 + r.Int64N(int64(30*day))), First: r.Float64(), Middle: r.Float64(), Last: r.Float64()}
		m := RuleModels[trial%len(RuleModels)]
		w = Weights(m, p, touches, conv, w)
		var sum float64
		for _, x := range w {
			if !(x >= 0) {
				t.Fatalf("trial %d %v: negative or NaN weight in %v", trial, m, w)
			}
			sum += x
		}
		if math.Abs(sum-1) > 1e-12 {
			t.Fatalf("trial %d %v: weights sum to %v", trial, m, sum)
		}
		total := r.Int64N(10_000_000)
		cents = Apportion(total, w, cents)
		var got int64
		for i, c := range cents {
			got += c
			exact := float64(total) * w[i] / sum
			if float64(c) < math.Floor(exact)-1e-6 || float64(c) > math.Ceil(exact)+1e-6 {
				t.Fatalf("trial %d: index %d got %d, exact share %v", trial, i, c, exact)
			}
		}
		if got != total {
			t.Fatalf("trial %d %v: Apportion sums to %d, want %d", trial, m, got, total)
		}
	}
}

func TestHotPathAllocations(t *testing.T) {
	touches := touchesAgo([]string{"display", "social", "email", "paid_search", "direct"},
		[]time.Duration{28 * day, 21 * day, 14 * day, 7 * day, 0})
	w := make([]float64, 0, 16)
	cents := make([]int64, 0, 16)
	allocs := testing.AllocsPerRun(100, func() {
		for _, m := range RuleModels {
			w = Weights(m, DefaultParams(), touches, conv, w)
			cents = Apportion(12345, w, cents)
		}
	})
	if allocs != 0 {
		t.Errorf("Weights+Apportion allocate %v times per conversion, want 0", allocs)
	}
}
