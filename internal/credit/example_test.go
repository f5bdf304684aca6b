package credit_test

import (
	"fmt"
	"time"

	"github.com/touchledger/touchledger/internal/credit"
)

// A 50.00 conversion after five touches, 28, 21, 14, 7 and 0 days before it,
// under time decay with the default 7-day half-life: 50/31 × (1, 2, 4, 8, 16)
// (docs/references.md §2), rounded to cents with the sum kept exact.
func ExampleWeights() {
	conv := time.Date(2026, 3, 10, 12, 0, 0, 0, time.UTC)
	var touches []credit.Touch
	for i, ch := range []string{"display", "social", "email", "paid_search", "direct"} {
		touches = append(touches, credit.Touch{Channel: ch, Time: conv.Add(-time.Duration(28-7*i) * 24 * time.Hour)})
	}
	w := credit.Weights(credit.TimeDecay, credit.DefaultParams(), touches, conv, nil)
	cents := credit.Apportion(5000, w, nil)
	for i, t := range touches {
		fmt.Printf("%-12s %.4f %5d\n", t.Channel, 50*w[i], cents[i])
	}
	// Output:
	// display      1.6129   161
	// social       3.2258   323
	// email        6.4516   645
	// paid_search  12.9032  1290
	// direct       25.8065  2581
}

// Journeys A → B → C → @converted, A → @lost and B → C → @lost at order 1
// (docs/references.md §3 EX1): P = 1/3 and shares 0.2 / 0.4 / 0.4.
func ExampleMarkov() {
	sum := map[credit.Transition]int64{}
	var steps []credit.Transition
	for _, j := range []struct {
		path      []string
		converted bool
	}{{[]string{"A", "B", "C"}, true}, {[]string{"A"}, false}, {[]string{"B", "C"}, false}} {
		steps = credit.PathTransitions(steps[:0], j.path, 1, j.converted, true)
		for _, s := range steps {
			sum[s]++
		}
	}
	var counts []credit.TransitionCount
	for t, c := range sum {
		counts = append(counts, credit.TransitionCount{From: t.From, To: t.To, Count: c})
	}
	res, err := credit.Markov(counts)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("P = %.4f\n", res.PConversion)
	for i, c := range res.Channels {
		fmt.Printf("%s removal effect %.2f share %.2f\n", c, res.RemovalEffect[i], res.Share[i])
	}
	// Output:
	// P = 0.3333
	// A removal effect 0.50 share 0.20
	// B removal effect 1.00 share 0.40
	// C removal effect 1.00 share 0.40
}

// The three-channel example of docs/references.md §4: 50 conversions shared by
// conversion-rate Shapley values, with each channel's journey support.
func ExampleShapley() {
	coalitions := []credit.Coalition{
		{Channels: []string{"A"}, Journeys: 100, Conversions: 10},
		{Channels: []string{"B"}, Journeys: 60, Conversions: 6},
		{Channels: []string{"C"}, Journeys: 80, Conversions: 4},
		{Channels: []string{"A", "B"}, Journeys: 60, Conversions: 12},
		{Channels: []string{"A", "C"}, Journeys: 30, Conversions: 6},
		{Channels: []string{"B", "C"}, Journeys: 20, Conversions: 3},
		{Channels: []string{"A", "B", "C"}, Journeys: 30, Conversions: 9},
	}
	res, err := credit.Shapley(coalitions, 15, "other")
	if err != nil {
		fmt.Println(err)
		return
	}
	for i, c := range res.Channels {
		fmt.Printf("%s %.6f conversions from %d journeys\n", c, 50*res.Share[i], res.Journeys[i])
	}
	// Output:
	// A 23.634019 conversions from 220 journeys
	// B 20.976281 conversions from 170 journeys
	// C 5.389701 conversions from 160 journeys
}
