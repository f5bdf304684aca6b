package dashboard

import (
	"fmt"
	"testing"
	"time"

	"github.com/touchledger/touchledger/internal/query"
)

// benchAnswers are fixed answers of a busy month (invented numbers): eight
// channels over 28 days, eight models and 28 days of 5-minute alert points.
func benchAnswers(points int) Answers {
	a := fixedAnswers()
	chans := []string{"coupon_partners", "direct", "display_ads", "newsletter", "podcast_spots", "review_partners", "search_ads", "social_ads"}
	a.Shift = query.ShiftAnswer{Model: "linear", Channels: chans}
	for d := range 28 {
		day := query.ShiftDay{Day: time.Date(2026, 10, 1+d, 0, 0, 0, 0, time.UTC).Format("2006-01-02"), Conversions: 400}
		for i, c := range chans {
			day.Channels = append(day.Channels, query.ShiftCell{Channel: c, Conversions: float64(10 + i*d%37), Share: 0.125})
		}
		a.Shift.Days = append(a.Shift.Days, day)
	}
	a.Credit = nil
	for _, m := range query.Models() {
		c := query.CreditAnswer{Model: m}
		for i, ch := range chans {
			c.Channels = append(c.Channels, query.ChannelCredit{Channel: ch, Conversions: float64(100 + i), Share: 0.125})
		}
		a.Credit = append(a.Credit, ModelCredit{Model: m, Answer: c})
	}
	a.Alerts.Interval = (5 * time.Minute).String()
	a.Alerts.Points = nil
	t0 := time.Date(2026, 10, 1, 0, 0, 0, 0, time.UTC)
	for i := range points {
		a.Alerts.Points = append(a.Alerts.Points, query.AlertPoint{Start: t0.Add(time.Duration(i) * 5 * time.Minute),
			Sessions: 40, Rate: float64(i%17) / 40, Statistic: 0.3, Baseline: 0.3, Limit: 0.45, Evaluated: true})
	}
	a.Alerts.Alerts = []query.AlertRecord{{Opened: t0.Add(20 * 24 * time.Hour), Closed: t0.Add(20*24*time.Hour + time.Hour), Peak: 0.9}}
	return a
}

// BenchmarkBuildRender measures drawing the whole page from answers (the
// pure part of a request; the queries are the querier's benchmarks).
func BenchmarkBuildRender(b *testing.B) {
	for _, points := range []int{288, 8064} { // one day, 28 days of 5-minute intervals
		b.Run(fmt.Sprintf("points=%d", points), func(b *testing.B) {
			a := benchAnswers(points)
			sel := Selection{Model: "linear", Last: 30 * 24 * time.Hour, Days: 28}
			b.ReportAllocs()
			var size int
			for b.Loop() {
				p := Build(a, sel, query.Models(), "touchledger")
				out, err := Render(p)
				if err != nil {
					b.Fatal(err)
				}
				size = len(out)
			}
			b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "pages/s")
			b.ReportMetric(float64(size), "bytes/page")
		})
	}
}
