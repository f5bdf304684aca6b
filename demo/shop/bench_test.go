package shop

import (
	"fmt"
	"io"
	"testing"
)

// BenchmarkGenerate measures Generate into io.Discard for the default world
// at two sizes; 200 000 visitors write about 1 M events.
func BenchmarkGenerate(b *testing.B) {
	for _, visitors := range []int{20_000, 200_000} {
		b.Run(fmt.Sprintf("visitors=%d", visitors), func(b *testing.B) {
			c := DefaultConfig()
			c.Visitors = visitors
			b.ReportAllocs()
			events := 0
			for b.Loop() {
				st, err := Generate(io.Discard, c)
				if err != nil {
					b.Fatal(err)
				}
				events += st.Events
			}
			b.ReportMetric(float64(events)/b.Elapsed().Seconds(), "events/s")
		})
	}
}

// BenchmarkTrueIncremental measures the nine re-runs behind the ground truth.
func BenchmarkTrueIncremental(b *testing.B) {
	c := DefaultConfig()
	c.Visitors = 20_000
	b.ReportAllocs()
	for b.Loop() {
		if _, _, err := TrueIncremental(c); err != nil {
			b.Fatal(err)
		}
	}
}
