package credit

import (
	"cmp"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
	"time"
)

// benchJourneys is a fixed-seed stand-in for a 28-day window: journeys over
// channels with skewed popularity (weight 1/(i+1)^0.8), 1 + geometric touch
// counts (mean about 3), a 30 % chance of repeating the previous channel, and
// a conversion chance that grows with the distinct channels touched. The
// shape is invented for load, not taken from any data.
type benchJourney struct {
	path      []string
	converted bool
}

func benchJourneys(seed uint64, count, channels int) []benchJourney {
	r := rand.New(rand.NewPCG(seed, 28))
	names := make([]string, channels)
	cum := make([]float64, channels)
	lift := make([]float64, channels)
	var total float64
	for i := range names {
		names[i] = fmt.Sprintf("ch%02d", i)
		total += 1 / math.Pow(float64(i+1), 0.8)
		cum[i] = total
		lift[i] = 0.005 + 0.035*r.Float64()
	}
	pick := func() int {
		u := r.Float64() * total
		for i, c := range cum {
			if u < c {
				return i
			}
		}
		return channels - 1
	}
	js := make([]benchJourney, count)
	seen := make([]bool, channels)
	for j := range js {
		n := 1
		for n < 30 && r.Float64() < 0.65 {
			n++
		}
		clear(seen)
		path := make([]string, n)
		last := -1
		miss := 1.0
		for i := range path {
			c := last
			if c < 0 || r.Float64() >= 0.3 {
				c = pick()
			}
			path[i] = names[c]
			if !seen[c] {
				seen[c] = true
				miss *= 1 - lift[c]
			}
			last = c
		}
		js[j] = benchJourney{path: path, converted: r.Float64() < 1-miss}
	}
	return js
}

func benchCounts(js []benchJourney, k int) (counts []TransitionCount, events int64) {
	sum := map[Transition]int64{}
	var buf []Transition
	for _, j := range js {
		buf = PathTransitions(buf[:0], j.path, k, j.converted, true)
		for _, t := range buf {
			sum[t]++
		}
		events += int64(len(j.path))
		if j.converted {
			events++
		}
	}
	for t, c := range sum {
		counts = append(counts, TransitionCount{From: t.From, To: t.To, Count: c})
	}
	// Key order, as a sorted store returns them.
	slices.SortFunc(counts, func(a, b TransitionCount) int {
		return cmp.Or(strings.Compare(a.From, b.From), strings.Compare(a.To, b.To))
	})
	return counts, events
}

// BenchmarkMarkov answers Markov credit over 200k journeys on 20 channels;
// events/s counts the touches and conversions the transition counts sum up.
// Target (issue 3): <= 50 ms per answer at orders 1 and 3.
func BenchmarkMarkov(b *testing.B) {
	js := benchJourneys(1, 200_000, 20)
	for _, k := range []int{1, 2, 3} {
		counts, events := benchCounts(js, k)
		b.Run(fmt.Sprintf("order=%d/channels=20/journeys=200k", k), func(b *testing.B) {
			ch, err := buildChain(counts)
			if err != nil {
				b.Fatal(err)
			}
			b.ReportAllocs()
			for b.Loop() {
				if _, err := Markov(counts); err != nil {
					b.Fatal(err)
				}
			}
			elapsed := b.Elapsed().Seconds()
			b.ReportMetric(float64(events)*float64(b.N)/elapsed, "events/s")
			b.ReportMetric(elapsed*1e3/float64(b.N), "ms/answer")
			b.ReportMetric(float64(ch.n), "states")
			b.ReportMetric(float64(len(counts)), "transitions")
		})
	}
}

// BenchmarkWeights runs the hot path of rule-based credit: Weights and
// Apportion for all six models per conversion, over fixed-seed conversions
// with 1..10 touches. events/s counts touches and conversions.
func BenchmarkWeights(b *testing.B) {
	r := rand.New(rand.NewPCG(9, 9))
	channels := []string{"direct", "email", "social", "display", "paid_search", "affiliate"}
	type conversion struct {
		touches []Touch
		at      time.Time
		value   int64
	}
	convs := make([]conversion, 10_000)
	var events int64
	for i := range convs {
		n := 1 + i%10
		at := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC).Add(time.Duration(r.Int64N(int64(30 * 24 * time.Hour))))
		ts := make([]Touch, n)
		t := at.Add(-time.Duration(r.Int64N(int64(30 * 24 * time.Hour))))
		for j := range ts {
			ts[j] = Touch{Channel: channels[r.IntN(len(channels))], Time: t}
			t = t.Add(time.Duration(r.Int64N(int64(at.Sub(t)) + 1)))
		}
		convs[i] = conversion{ts, at, r.Int64N(50_000_000)}
		events += int64(n) + 1
	}
	p := DefaultParams()
	w := make([]float64, 0, 16)
	units := make([]int64, 0, 16)
	b.ReportAllocs()
	for b.Loop() {
		for _, c := range convs {
			for _, m := range RuleModels {
				w = Weights(m, p, c.touches, c.at, w)
				units = Apportion(c.value, w, units)
			}
		}
	}
	b.ReportMetric(float64(events)*float64(b.N)/b.Elapsed().Seconds(), "events/s")
	b.ReportMetric(float64(len(convs))*float64(b.N)/b.Elapsed().Seconds(), "conversions/s")
}

// BenchmarkShapley answers Shapley credit over the coalitions of 200k
// journeys on 15 channels (and 20, the hard limit). Target (issue 3):
// <= 50 ms per answer with 15 channels.
func BenchmarkShapley(b *testing.B) {
	for _, channels := range []int{15, 20} {
		js := benchJourneys(2, 200_000, channels)
		type key = string
		agg := map[key]*Coalition{}
		var events int64
		for _, j := range js {
			set := slices.Clone(j.path)
			slices.Sort(set)
			set = slices.Compact(set)
			k := strings.Join(set, stateSep)
			c := agg[k]
			if c == nil {
				c = &Coalition{Channels: set}
				agg[k] = c
			}
			c.Journeys++
			events += int64(len(j.path))
			if j.converted {
				c.Conversions++
				events++
			}
		}
		coalitions := make([]Coalition, 0, len(agg))
		for _, c := range agg {
			coalitions = append(coalitions, *c)
		}
		b.Run(fmt.Sprintf("channels=%d/journeys=200k", channels), func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				if _, err := Shapley(coalitions, channels, "other"); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(events)*float64(b.N)/b.Elapsed().Seconds(), "events/s")
			b.ReportMetric(b.Elapsed().Seconds()*1e3/float64(b.N), "ms/answer")
			b.ReportMetric(float64(len(coalitions)), "coalitions")
		})
	}
}
