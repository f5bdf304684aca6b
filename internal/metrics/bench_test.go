package metrics_test

import (
	"testing"

	"github.com/prometheus/client_golang/prometheus"

	"github.com/touchledger/touchledger/internal/metrics"
)

// BenchmarkScrape measures one scrape that recomputes every window gauge
// (a commit happened since the last scrape): eight models over 7 days, open
// sessions and journeys, abandonment and alerts, on the 400-visitor fixture.
func BenchmarkScrape(b *testing.B) {
	f := openFixture(b)
	f.replay(b)
	st := &countingStatus{p: f.proc}
	reg := prometheus.NewPedanticRegistry()
	metrics.New(reg, metrics.Options{Status: st, OpenQuerier: f.open})
	b.ReportAllocs()
	for b.Loop() {
		st.commits.Add(1)
		if _, err := reg.Gather(); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "scrapes/s")
}
