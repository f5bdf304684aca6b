package sessionize_test

import (
	"bufio"
	"bytes"
	"fmt"
	"testing"
	"time"

	"github.com/cespare/xxhash/v2"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/credit"
	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/sessionize"
	"github.com/touchledger/touchledger/internal/tally"
)

const day = 24 * time.Hour

func defaultParams() sessionize.Params {
	return sessionize.Params{
		SessionGap: 30 * time.Minute, ClickLookback: 30 * day, ViewLookback: day,
		JourneyTimeout: 30 * day, DedupHorizon: 7 * day, Conversions: []string{"order"},
		Credit:  credit.Params{HalfLife: 7 * day, First: 0.4, Middle: 0.2, Last: 0.4, Direct: "direct"},
		MaxPath: 64, MaxTouches: 100,
		PathStats: true, FunnelSteps: []string{"product_view", "basket_add", "checkout", "order"},
		BasketStep: "basket_add",
	}
}

// BenchmarkPipeline measures the pure pipeline: sessions, journeys and the six
// rule-based models over pre-decoded demo events (fixed seed), one core.
// Target (issue 2): >= 2 M events/s.
func BenchmarkPipeline(b *testing.B) {
	for _, paths := range []bool{false, true} {
		b.Run(fmt.Sprintf("pathstats=%v", paths), func(b *testing.B) { benchPipeline(b, paths) })
	}
}

func benchPipeline(b *testing.B, paths bool) {
	c := shop.DefaultConfig()
	c.Visitors = 40000
	var buf bytes.Buffer
	if _, err := shop.Generate(&buf, c); err != nil {
		b.Fatal(err)
	}
	dec := event.NewDecoder(event.DefaultLimits(), "")
	var evs []event.Event
	var hashes []uint64
	sc := bufio.NewScanner(&buf)
	for sc.Scan() {
		e, err := dec.Decode(sc.Bytes())
		if err != nil {
			b.Fatal(err)
		}
		evs = append(evs, e)
		hashes = append(hashes, xxhash.Sum64String(e.ID))
	}
	p := defaultParams()
	p.PathStats = paths
	tr, err := sessionize.NewTracker(p)
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.ResetTimer()
	n := 0
	for b.Loop() {
		users := make(map[string]*sessionize.UserState, c.Visitors)
		batch := tally.NewBatch(300)
		for i := range evs {
			e := &evs[i]
			u := users[e.User]
			if u == nil {
				u = &sessionize.UserState{}
				users[e.User] = u
			}
			tr.Apply(u, e, hashes[i], batch)
		}
		n += len(evs)
	}
	b.ReportMetric(float64(n)/b.Elapsed().Seconds(), "events/s")
}
