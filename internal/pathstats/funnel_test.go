package pathstats

import (
	"math/rand/v2"
	"slices"
	"testing"
)

var shopSteps = []string{"product_view", "basket_add", "checkout", "payment", "order"}

func TestFunnelDepth(t *testing.T) {
	tests := []struct {
		name    string
		actions []string
		steps   []string
		want    int
	}{
		{"all in order", []string{"product_view", "basket_add", "checkout", "payment", "order"}, shopSteps, 5},
		{"other actions between", []string{"home", "product_view", "search", "product_view", "basket_add", "home", "checkout"}, shopSteps, 3},
		{"first step missing", []string{"basket_add", "checkout", "order"}, shopSteps, 0},
		{"step before its predecessor does not count", []string{"basket_add", "product_view", "checkout"}, shopSteps, 1},
		{"later repeat counts", []string{"basket_add", "product_view", "basket_add"}, shopSteps, 2},
		{"skipping a step stops the funnel", []string{"product_view", "checkout", "payment", "order"}, shopSteps, 1},
		{"repeated step needs two actions", []string{"product_view", "basket_add"}, []string{"product_view", "product_view", "basket_add"}, 1},
		{"repeated step reached", []string{"product_view", "product_view", "basket_add"}, []string{"product_view", "product_view", "basket_add"}, 3},
		{"no actions", nil, shopSteps, 0},
		{"no steps", []string{"product_view"}, nil, 0},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if got := FunnelDepth(tt.actions, tt.steps); got != tt.want {
				t.Errorf("FunnelDepth(%v) = %d, want %d", tt.actions, got, tt.want)
			}
		})
	}
}

// bruteFunnelDepth is the definition read literally: the largest d such that
// steps[0..d−1] occur as a subsequence of actions, tried by every choice of
// positions (small inputs only).
func bruteFunnelDepth(actions, steps []string) int {
	best := 0
	var search func(pos, matched int)
	search = func(pos, matched int) {
		best = max(best, matched)
		if matched == len(steps) {
			return
		}
		for i := pos; i < len(actions); i++ {
			if actions[i] == steps[matched] {
				search(i+1, matched+1)
			}
		}
	}
	search(0, 0)
	return best
}

func TestFunnelDepthMatchesSubsequenceSearch(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	alphabet := []string{"a", "b", "c", "d"}
	for range 500 {
		actions := make([]string, rng.IntN(9))
		for i := range actions {
			actions[i] = alphabet[rng.IntN(len(alphabet))]
		}
		steps := make([]string, 1+rng.IntN(4))
		for i := range steps {
			steps[i] = alphabet[rng.IntN(len(alphabet))]
		}
		if got, want := FunnelDepth(actions, steps), bruteFunnelDepth(actions, steps); got != want {
			t.Fatalf("FunnelDepth(%v, %v) = %d, exhaustive search %d", actions, steps, got, want)
		}
	}
}

func TestFunnelExample(t *testing.T) {
	// docs/references.md §5 funnel example [computed]: counts 1000 → 300 → 150 →
	// 120 → 90 give step abandonment 7/10, 1/2, 1/5, 1/4, overall conversion
	// 9/100 and basket abandonment 1 − 90/300 = 7/10. The sessions are built so
	// that 700 stop after step 1, 150 after 2, 30 after 3, 30 after 4 and 90
	// finish; each carries unrelated actions and an out-of-order step.
	var sessions [][]string
	for _, group := range []struct{ depth, sessions int }{{1, 700}, {2, 150}, {3, 30}, {4, 30}, {5, 90}} {
		for range group.sessions {
			s := []string{"home", "order"} // order before product_view must not count
			for _, step := range shopSteps[:group.depth] {
				s = append(s, step, "search")
			}
			sessions = append(sessions, s)
		}
	}
	reached := make([]int64, len(shopSteps))
	for _, s := range sessions {
		AddDepth(reached, FunnelDepth(s, shopSteps), 1)
	}
	if want := []int64{1000, 300, 150, 120, 90}; !slices.Equal(reached, want) {
		t.Fatalf("reached = %v, want %v", reached, want)
	}
	got := StepAbandonment(reached)
	want := []float64{7.0 / 10, 1.0 / 2, 1.0 / 5, 1.0 / 4}
	if !slices.Equal(got, want) {
		t.Errorf("StepAbandonment = %v, want %v", got, want)
	}
	if got, want := Abandonment(reached[1], reached[4]), 7.0/10; got != want {
		t.Errorf("basket abandonment = %v, want %v", got, want)
	}
	// Overall conversion 9/100, so abandonment from entry to the end is 91/100.
	if got, want := Abandonment(reached[0], reached[4]), 91.0/100; got != want {
		t.Errorf("entry-to-end abandonment = %v, want %v", got, want)
	}
}

func TestAbandonmentEdges(t *testing.T) {
	tests := []struct {
		name    string
		reached []int64
		want    []float64
	}{
		{"nobody at a step", []int64{10, 0, 0}, []float64{1, 0}},
		{"one step", []int64{10}, nil},
		{"no steps", nil, nil},
		{"nobody lost", []int64{5, 5}, []float64{0}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if got := StepAbandonment(tt.reached); !slices.Equal(got, tt.want) {
				t.Errorf("StepAbandonment(%v) = %v, want %v", tt.reached, got, tt.want)
			}
		})
	}
	reached := make([]int64, 3)
	AddDepth(reached, 7, 1) // deeper than the funnel counts every step
	AddDepth(reached, 0, 5)
	AddDepth(reached, 2, 3)
	if want := []int64{4, 4, 1}; !slices.Equal(reached, want) {
		t.Errorf("AddDepth counts = %v, want %v", reached, want)
	}
}
