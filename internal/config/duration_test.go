package config

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"gopkg.in/yaml.v3"
)

// Expected values are checked by hand against time.ParseDuration's grammar
// with a day of 24 hours.
func TestParseDuration(t *testing.T) {
	tests := []struct {
		in   string
		want time.Duration
	}{
		{"30d", 720 * time.Hour},
		{"7d", 168 * time.Hour},
		{"1d", 24 * time.Hour},
		{"1d12h", 36 * time.Hour},
		{"3d12h30m", 84*time.Hour + 30*time.Minute},
		{"0d", 0},
		{"90m", 90 * time.Minute},
		{"1h30m", 90 * time.Minute},
		{"30m", 30 * time.Minute},
		{"1.5h", 90 * time.Minute},
		{"1s", time.Second},
		{"250ms", 250 * time.Millisecond},
		{"0", 0},
		{"0s", 0},
		{" 5m ", 5 * time.Minute},
		{"106751d", 106751 * 24 * time.Hour}, // the most whole days a time.Duration holds
	}
	for _, tt := range tests {
		got, err := ParseDuration(tt.in)
		if err != nil || got != tt.want {
			t.Errorf("ParseDuration(%q) = %v, %v; want %v", tt.in, got, err, tt.want)
		}
	}
}

func TestParseDurationErrors(t *testing.T) {
	for _, in := range []string{
		"", " ", "30", "d", "7days", "1.5d", "7D", "1h2d", "3d4d", "1d 12h", "-5m", "+5m", "1d-5m",
		"106752d", "106751d24h", "99999999999999999999d", "5 minutes", "∞",
	} {
		if got, err := ParseDuration(in); err == nil {
			t.Errorf("ParseDuration(%q) = %v, want an error", in, got)
		} else if strings.ToLower(err.Error()[:1]) != err.Error()[:1] {
			t.Errorf("ParseDuration(%q) error %q starts in upper case", in, err)
		}
	}
}

func TestDurationString(t *testing.T) {
	tests := []struct {
		in   time.Duration
		want string
	}{
		{0, "0s"},
		{720 * time.Hour, "30d"},
		{24 * time.Hour, "1d"},
		{36 * time.Hour, "1d12h"},
		{90 * time.Minute, "1h30m"},
		{30 * time.Minute, "30m"},
		{time.Hour, "1h"},
		{10 * time.Second, "10s"},
		{time.Hour + 10*time.Second, "1h0m10s"},
		{24*time.Hour + time.Minute, "1d1m"},
		{1500 * time.Millisecond, "1.5s"},
		{250 * time.Millisecond, "250ms"},
		{-5 * time.Minute, "-5m"},
	}
	for _, tt := range tests {
		if got := Duration(tt.in).String(); got != tt.want {
			t.Errorf("Duration(%v).String() = %q, want %q", tt.in, got, tt.want)
		}
	}
}

// TestDurationRoundTrip checks ParseDuration(String()) on random durations
// of every magnitude, including the largest.
func TestDurationRoundTrip(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 5))
	values := []time.Duration{0, 1, time.Duration(math.MaxInt64), 24 * time.Hour, 24*time.Hour - 1}
	for range 5000 {
		values = append(values, time.Duration(rng.Int64N(math.MaxInt64>>rng.IntN(63))))
	}
	for _, v := range values {
		s := Duration(v).String()
		got, err := ParseDuration(s)
		if err != nil || got != v {
			t.Fatalf("ParseDuration(%q) = %v, %v; want %v", s, got, err, v)
		}
	}
}

func TestDurationYAML(t *testing.T) {
	type doc struct {
		Gap Duration `yaml:"gap"`
	}
	var d doc
	if err := yaml.Unmarshal([]byte("gap: 1d12h\n"), &d); err != nil || d.Gap.D() != 36*time.Hour {
		t.Errorf("unmarshal 1d12h = %v, %v; want 36h", d.Gap.D(), err)
	}
	out, err := yaml.Marshal(doc{Gap: Duration(36 * time.Hour)})
	if err != nil || string(out) != "gap: 1d12h\n" {
		t.Errorf("marshal 36h = %q, %v; want %q", out, err, "gap: 1d12h\n")
	}
	for _, text := range []string{"gap: {d: 1}\n", "gap: [1d]\n", "gap: soon\n"} {
		if err := yaml.Unmarshal([]byte(text), &d); err == nil || !strings.Contains(err.Error(), "line 1") {
			t.Errorf("unmarshal %q error = %v, want one naming line 1", text, err)
		}
	}
}
