package shop

import (
	"errors"
	"fmt"
	"io"
	"math"
	"testing"
	"time"
)

func TestTrueIncrementalSumsToIncrementalTotal(t *testing.T) {
	tests := []struct {
		name string
		seed int64
		off  map[string]bool
	}{
		{"seed=1", 1, nil},
		{"seed=7", 7, nil},
		{"seed=-3", -3, nil},
		{"seed=1/off=search_ads,podcast_spots", 1, map[string]bool{"search_ads": true, "podcast_spots": true}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			c := testConfig(4000)
			c.Seed, c.Off = tt.seed, tt.off
			per, total, err := TrueIncremental(c)
			if err != nil {
				t.Fatal(err)
			}
			// The simulated incremental total, from the written events.
			_, with := generate(t, c)
			none := c
			none.Off = map[string]bool{}
			for _, name := range Channels() {
				none.Off[name] = true
			}
			_, without := generate(t, none)
			if want := float64(with.Conversions - without.Conversions); total != want {
				t.Errorf("incremental total = %v, want %v (conversions %d with, %d without channels)",
					total, want, with.Conversions, without.Conversions)
			}
			if total <= 0 {
				t.Errorf("incremental total = %v, want > 0", total)
			}
			got := 0.0
			for _, name := range Channels() {
				x, ok := per[name]
				if !ok {
					t.Fatalf("channel %q missing from %v", name, per)
				}
				if x < 0 {
					t.Errorf("%s: %v, want >= 0 (switching a channel off never adds a purchase here)", name, x)
				}
				if tt.off[name] && x != 0 {
					t.Errorf("%s is already off: %v, want 0", name, x)
				}
				got += x
			}
			if math.Abs(got-total) > 1e-9 {
				t.Errorf("sum over channels = %v, incremental total = %v (%v)", got, total, per)
			}
			// coupon_partners only shows up at checkout and lifts nothing (world.go).
			if per["coupon_partners"] != 0 {
				t.Errorf("coupon_partners = %v, want 0", per["coupon_partners"])
			}
		})
	}
}

// TestTrueIncrementalIsShapley checks doc.go's claim: for this world the
// removal differences are the Shapley values of the game v(S) = conversions
// with exactly the channels S on, minus those with none. Formula:
// docs/references.md §4 (Shapley 1953 [from memory]); computed here over all 2^7
// coalitions by brute force.
func TestTrueIncrementalIsShapley(t *testing.T) {
	c := testConfig(1500)
	per, _, err := TrueIncremental(c)
	if err != nil {
		t.Fatal(err)
	}
	names := Channels()
	n := len(names)
	v := make([]float64, 1<<n) // v[mask]: conversions with the channels in mask on
	for mask := range v {
		w := c
		w.Off = map[string]bool{}
		for i, name := range names {
			if mask&(1<<i) == 0 {
				w.Off[name] = true
			}
		}
		v[mask] = float64(countConversions(w))
	}
	fact := func(k int) float64 { return math.Gamma(float64(k + 1)) }
	for i, name := range names {
		phi := 0.0
		for mask := range v {
			if mask&(1<<i) != 0 {
				continue
			}
			s := 0
			for m := mask; m != 0; m &= m - 1 {
				s++
			}
			phi += fact(s) * fact(n-s-1) / fact(n) * (v[mask|1<<i] - v[mask])
		}
		if math.Abs(phi-per[name]) > 1e-9 {
			t.Errorf("%s: Shapley value %v, TrueIncremental %v", name, phi, per[name])
		}
	}
}

func TestChannelOffRemovesItsTouches(t *testing.T) {
	c := testConfig(4000)
	_, all := generate(t, c)
	for _, off := range Channels() {
		t.Run("off="+off, func(t *testing.T) {
			w := c
			w.Off = map[string]bool{off: true}
			_, got := generate(t, w)
			if got.PerChannelTouches[off] != 0 {
				t.Errorf("%s off: %d touches, want 0", off, got.PerChannelTouches[off])
			}
			if all.PerChannelTouches[off] == 0 {
				t.Errorf("%s on: no touches at all", off)
			}
			for _, other := range Channels() {
				// coupon touches follow checkouts, which follow purchases
				if other == off || other == "coupon_partners" {
					continue
				}
				if got.PerChannelTouches[other] != all.PerChannelTouches[other] {
					t.Errorf("%s off changed %s touches: %d, want %d", off, other,
						got.PerChannelTouches[other], all.PerChannelTouches[other])
				}
			}
			if got.Conversions > all.Conversions {
				t.Errorf("%s off: %d conversions, more than %d with it on", off, got.Conversions, all.Conversions)
			}
		})
	}
}

func TestConfigValidate(t *testing.T) {
	ok := DefaultConfig()
	ok.Visitors = 300
	tests := []struct {
		name   string
		change func(*Config)
		valid  bool
	}{
		{"default", func(*Config) {}, true},
		{"no incident", func(c *Config) { c.IncidentDay, c.IncidentLength = -1, 0 }, true},
		{"no shift", func(c *Config) { c.ShiftDay = c.Days }, true},
		{"zero start", func(c *Config) { c.Start = time.Time{} }, false},
		{"zero days", func(c *Config) { c.Days = 0 }, false},
		{"negative visitors", func(c *Config) { c.Visitors = -1 }, false},
		{"negative shift day", func(c *Config) { c.ShiftDay = -1 }, false},
		{"incident after the end", func(c *Config) { c.IncidentDay = c.Days }, false},
		{"incident start past the day", func(c *Config) { c.IncidentStart = 24 * time.Hour }, false},
		{"negative incident length", func(c *Config) { c.IncidentLength = -time.Minute }, false},
		{"unknown channel off", func(c *Config) { c.Off = map[string]bool{"direct": true} }, false},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			c := ok
			tt.change(&c)
			err := c.Validate()
			if got := err == nil; got != tt.valid {
				t.Fatalf("Validate() = %v, want valid %v", err, tt.valid)
			}
			if err != nil && !errors.Is(err, ErrConfig) {
				t.Errorf("Validate() = %v, want it to wrap ErrConfig", err)
			}
			if _, genErr := Generate(io.Discard, c); (genErr == nil) != tt.valid {
				t.Errorf("Generate() error = %v, want valid %v", genErr, tt.valid)
			}
			if _, _, truthErr := TrueIncremental(c); (truthErr == nil) != tt.valid {
				t.Errorf("TrueIncremental() error = %v, want valid %v", truthErr, tt.valid)
			}
		})
	}
}

type failingWriter struct{ after int }

var errDiskFull = errors.New("disk full")

func (w *failingWriter) Write(p []byte) (int, error) {
	if w.after <= 0 {
		return 0, errDiskFull
	}
	w.after--
	return len(p), nil
}

func TestGenerateReportsWriteErrors(t *testing.T) {
	for _, after := range []int{0, 1} {
		t.Run(fmt.Sprintf("after=%d", after), func(t *testing.T) {
			_, err := Generate(&failingWriter{after: after}, testConfig(6000))
			if !errors.Is(err, errDiskFull) {
				t.Fatalf("Generate() = %v, want it to wrap %v", err, errDiskFull)
			}
		})
	}
}

func TestGenerateNoVisitors(t *testing.T) {
	data, st := generate(t, testConfig(0))
	if len(data) != 0 || st.Events != 0 || st.Conversions != 0 {
		t.Fatalf("got %d bytes, %+v; want nothing", len(data), st)
	}
}
