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
			start := time.Now()
			for b.Loop() {
				if _, err := Markov(counts); err != nil {
					b.Fatal(err)
				}
			}
			elapsed := time.Since(start).Seconds()
			b.ReportMetric(float64(events)*float64(b.N)/elapsed, "events/s")
			b.ReportMetric(elapsed*1e3/float64(b.N), "ms/answer")
			b.ReportMetric(float64(ch.n), "states")
			b.ReportMetric(float64(len(counts)), "transitions")
		})
	}
}
