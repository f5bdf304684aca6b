package shop

import (
	"testing"
	"time"
)

// TestWorldHasRhythmSessionsAndJourneys checks the shape the demo promises:
// a daily rhythm, visitors with several sessions, journeys over several days.
// The expected directions follow world.go's invented weights.
func TestWorldHasRhythmSessionsAndJourneys(t *testing.T) {
	c := testConfig(6000)
	data, _ := generate(t, c)
	lines := parseLines(t, data)

	var byHour [24]int
	for _, l := range lines {
		if l.Kind == "action" {
			byHour[l.Time.Hour()]++
		}
	}
	night := byHour[2] + byHour[3] + byHour[4]
	evening := byHour[19] + byHour[20] + byHour[21]
	if evening < 5*night {
		t.Errorf("actions 19-22h = %d, 2-5h = %d; want the evening at least 5x the night (%v)", evening, night, byHour)
	}

	sessions := sessionsOf(lines)
	perUser := map[string]int{}
	span := map[string][2]time.Time{}
	for _, s := range sessions {
		u := s[0].User
		perUser[u]++
		sp, ok := span[u]
		if !ok {
			sp[0] = s[0].Time
		}
		sp[1] = s[len(s)-1].Time
		span[u] = sp
	}
	several, multiDay := 0, 0
	for u, n := range perUser {
		if n >= 2 {
			several++
		}
		if span[u][1].Sub(span[u][0]) >= 24*time.Hour {
			multiDay++
		}
	}
	users := len(perUser)
	if frac := float64(several) / float64(users); frac < 0.25 {
		t.Errorf("visitors with 2+ sessions = %.2f of %d, want >= 0.25", frac, users)
	}
	if frac := float64(multiDay) / float64(users); frac < 0.15 {
		t.Errorf("visitors active over 24 h or more = %.2f of %d, want >= 0.15", frac, users)
	}

	funnel := map[string]int{}
	for _, l := range lines {
		if l.Kind == "action" {
			funnel[l.Action]++
		}
	}
	order := []string{ActionProductView, ActionBasketAdd, ActionCheckout, ActionOrder}
	for i := 1; i < len(order); i++ {
		if funnel[order[i]] == 0 || funnel[order[i]] >= funnel[order[i-1]] {
			t.Errorf("funnel %v: %s should be fewer than %s and more than 0", funnel, order[i], order[i-1])
		}
	}
	if funnel[ActionBasketRemove] == 0 {
		t.Errorf("funnel %v: no basket_remove", funnel)
	}
}
