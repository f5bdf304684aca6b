package query

import (
	"math"
	"testing"
)

// TestScorecard: shares are taken over the truth's channels only (direct has
// no true effect) and the error is the total absolute share difference
// (worked by hand: truth 30/10 → 0.75/0.25; model 10/10 → 0.5/0.5; error
// 0.25 + 0.25 = 0.5).
func TestScorecard(t *testing.T) {
	truth := Truth{IncrementalTotal: 40, Channels: map[string]float64{"a": 30, "b": 10}}
	answers := []CreditAnswer{
		{Model: "even", Channels: []ChannelCredit{{Channel: "a", Conversions: 10}, {Channel: "b", Conversions: 10}, {Channel: "direct", Conversions: 5}}},
		{Model: "exact", Channels: []ChannelCredit{{Channel: "a", Conversions: 6}, {Channel: "b", Conversions: 2}}},
		{Model: "blind", Channels: []ChannelCredit{{Channel: "direct", Conversions: 9}}},
	}
	s := Scorecard(answers, truth)
	want := map[string]float64{"exact": 0, "even": 0.5, "blind": 1}
	if len(s.Models) != 3 || s.Models[0].Model != "exact" || s.Models[2].Model != "blind" {
		t.Fatalf("order = %+v, want exact, even, blind", s.Models)
	}
	for _, m := range s.Models {
		if math.Abs(m.Error-want[m.Model]) > 1e-12 {
			t.Errorf("%s: error %v, want %v", m.Model, m.Error, want[m.Model])
		}
	}
	if s.True[0] != 0.75 || s.True[1] != 0.25 {
		t.Errorf("true shares %v, want [0.75 0.25]", s.True)
	}
}
