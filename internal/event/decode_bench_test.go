package event

import (
	"fmt"
	"math/rand/v2"
	"testing"
	"time"
)

// benchPayloads builds n realistic payloads from a fixed seed: about a third
// touches (a fifth of them views, most with a campaign), the rest shop actions
// (product_view, basket_add, checkout, order with a value), times with
// milliseconds, some with a zone offset, some with extra fields the decoder
// ignores. The shop and its channels are invented.
func benchPayloads(n int, seed uint64) [][]byte {
	rng := rand.New(rand.NewPCG(seed, seed^0x9e3779b97f4a7c15))
	channels := []string{"search_ads", "social_feed", "newsletter", "affiliate", "display", "video", "direct", "price_compare"}
	campaigns := []string{"spring_sale", "brand", "retarget_7d", "new_arrivals", ""}
	actions := []string{"product_view", "product_view", "product_view", "basket_add", "basket_add", "checkout", "order"}
	zones := []string{"Z", "Z", "Z", "+01:00", "-05:00"}
	start := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	out := make([][]byte, n)
	for i := range out {
		at := start.Add(time.Duration(rng.Int64N(int64(30 * 24 * time.Hour))))
		at = at.Truncate(time.Millisecond)
		zone := zones[rng.IntN(len(zones))]
		var stamp string
		if zone == "Z" {
			stamp = at.Format("2006-01-02T15:04:05.000Z")
		} else {
			offset, _ := time.Parse("-07:00", zone)
			_, secs := offset.Zone()
			stamp = at.In(time.FixedZone("", secs)).Format("2006-01-02T15:04:05.000-07:00")
		}
		id := fmt.Sprintf("%016x", rng.Uint64())
		user := fmt.Sprintf("shopper-%06d", rng.IntN(200_000))
		var payload string
		if rng.IntN(3) == 0 {
			interaction := "click"
			if rng.IntN(5) == 0 {
				interaction = "view"
			}
			payload = fmt.Sprintf(`{"id":%q,"user":%q,"time":%q,"kind":"touch","channel":%q,"campaign":%q,"interaction":%q}`,
				id, user, stamp, channels[rng.IntN(len(channels))], campaigns[rng.IntN(len(campaigns))], interaction)
		} else {
			action := actions[rng.IntN(len(actions))]
			extra := ""
			if rng.IntN(4) == 0 {
				extra = fmt.Sprintf(`,"page":"/item/%d","agent":{"device":"mobile","app":false}`, rng.IntN(5000))
			}
			if action == "order" {
				value := float64(rng.IntN(50_000)) / 100
				payload = fmt.Sprintf(`{"id":%q,"user":%q,"time":%q,"kind":"action","action":%q,"value":%.2f,"currency":"EUR"%s}`,
					id, user, stamp, action, value, extra)
			} else {
				payload = fmt.Sprintf(`{"id":%q,"user":%q,"time":%q,"kind":"action","action":%q%s}`,
					id, user, stamp, action, extra)
			}
		}
		out[i] = []byte(payload)
	}
	return out
}

// BenchmarkDecode measures decode + validate of one event on one goroutine.
// Target (issue 2 / brief): ≥ 1.5 M events/s on one core.
func BenchmarkDecode(b *testing.B) {
	payloads := benchPayloads(4096, 1)
	size := 0
	for _, p := range payloads {
		size += len(p)
	}
	d := NewDecoder(DefaultLimits(), "EUR")
	for _, p := range payloads { // every benchmark payload must be accepted
		if _, err := d.Decode(p); err != nil {
			b.Fatalf("payload %s: %v", p, err)
		}
	}
	b.SetBytes(int64(size / len(payloads)))
	b.ReportAllocs()
	i := 0
	for b.Loop() {
		if _, err := d.Decode(payloads[i%len(payloads)]); err != nil {
			b.Fatal(err)
		}
		i++
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "events/s")
}
