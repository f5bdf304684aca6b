package credit

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// journey is one path of channels ("A B C", "" for none) with its outcome,
// repeated times times.
type journey struct {
	path      string
	converted bool
	times     int64
}

func splitPath(p string) []string {
	if p == "" {
		return nil
	}
	return strings.Fields(p)
}

// countsOf aggregates the order-k transitions of journeys, the way the
// streaming side does.
func countsOf(js []journey, k int, collapse bool) []TransitionCount {
	sum := map[Transition]int64{}
	var order []Transition
	var buf []Transition
	for _, j := range js {
		buf = PathTransitions(buf[:0], splitPath(j.path), k, j.converted, collapse)
		for _, t := range buf {
			if _, ok := sum[t]; !ok {
				order = append(order, t)
			}
			sum[t] += j.times
		}
	}
	out := make([]TransitionCount, 0, len(order))
	for _, t := range order {
		out = append(out, TransitionCount{From: t.From, To: t.To, Count: sum[t]})
	}
	return out
}

func near(got, want, tol float64) bool {
	return math.Abs(got-want) <= tol*math.Max(1, math.Abs(want))
}

func nearSlice(got, want []float64, tol float64) bool {
	if len(got) != len(want) {
		return false
	}
	for i := range got {
		if !near(got[i], want[i], tol) {
			return false
		}
	}
	return true
}

func TestStateOfAndChannels(t *testing.T) {
	for _, tuple := range [][]string{{"email"}, {"email", "paid_search"}, {"a", "b", "a"}} {
		s := StateOf(tuple)
		if got := StateChannels(s); !slices.Equal(got, tuple) {
			t.Errorf("StateChannels(StateOf(%q)) = %q", tuple, got)
		}
	}
	for _, s := range []string{StateEntry, StateConverted, StateLost, ""} {
		if got := StateChannels(s); got != nil {
			t.Errorf("StateChannels(%q) = %q, want nil", s, got)
		}
	}
	if got, want := StateOf([]string{"a", "b"}), "a\x1fb"; got != want {
		t.Errorf("StateOf = %q, want %q", got, want)
	}
}

// Expected transitions follow the state definition of docs/references.md §3
// item 6: the tuple of the last <= k channels, @entry-padded prefixes first.
func TestPathTransitions(t *testing.T) {
	st := func(cs ...string) string { return StateOf(cs) }
	tests := []struct {
		name      string
		path      string
		k         int
		converted bool
		collapse  bool
		want      []Transition
	}{
		{"order 1", "A B C", 1, true, true, []Transition{
			{StateEntry, st("A")}, {st("A"), st("B")}, {st("B"), st("C")}, {st("C"), StateConverted}}},
		{"order 2", "A B C", 2, false, true, []Transition{
			{StateEntry, st("A")}, {st("A"), st("A", "B")}, {st("A", "B"), st("B", "C")}, {st("B", "C"), StateLost}}},
		{"order 3 longer path", "A B C D", 3, true, true, []Transition{
			{StateEntry, st("A")}, {st("A"), st("A", "B")}, {st("A", "B"), st("A", "B", "C")},
			{st("A", "B", "C"), st("B", "C", "D")}, {st("B", "C", "D"), StateConverted}}},
		{"order 3 short path", "A B", 3, false, false, []Transition{
			{StateEntry, st("A")}, {st("A"), st("A", "B")}, {st("A", "B"), StateLost}}},
		{"collapse repeats", "A A B B A", 1, true, true, []Transition{
			{StateEntry, st("A")}, {st("A"), st("B")}, {st("B"), st("A")}, {st("A"), StateConverted}}},
		{"keep repeats order 1", "A A B", 1, true, false, []Transition{
			{StateEntry, st("A")}, {st("A"), st("A")}, {st("A"), st("B")}, {st("B"), StateConverted}}},
		{"keep repeats order 2", "A A B", 2, false, false, []Transition{
			{StateEntry, st("A")}, {st("A"), st("A", "A")}, {st("A", "A"), st("A", "B")}, {st("A", "B"), StateLost}}},
		{"collapse order 2", "A A B", 2, false, true, []Transition{
			{StateEntry, st("A")}, {st("A"), st("A", "B")}, {st("A", "B"), StateLost}}},
		{"empty converted", "", 2, true, true, []Transition{{StateEntry, StateConverted}}},
		{"empty null", "", 1, false, false, []Transition{{StateEntry, StateLost}}},
		{"k below 1 is 1", "A B", 0, true, true, []Transition{
			{StateEntry, st("A")}, {st("A"), st("B")}, {st("B"), StateConverted}}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			prefix := []Transition{{"x", "y"}}
			got := PathTransitions(slices.Clone(prefix), splitPath(tt.path), tt.k, tt.converted, tt.collapse)
			want := append(prefix, tt.want...)
			if !slices.Equal(got, want) {
				t.Errorf("got  %q\nwant %q", got, want)
			}
		})
	}
}

func TestPathTransitionsAllocations(t *testing.T) {
	path := []string{"display", "social", "email", "paid_search", "direct"}
	dst := make([]Transition, 0, 16)
	allocs := testing.AllocsPerRun(100, func() {
		dst = PathTransitions(dst[:0], path, 3, true, true)
	})
	if allocs > 1 {
		t.Errorf("PathTransitions allocates %v times per call, want <= 1 (the joined string)", allocs)
	}
}

// markovCase is one worked example of docs/references.md §3 [computed; exact
// fractions]; method Anderl, Becker, von Wangenheim & Schumann (2016).
// NaN p and nil slices mean the source gives no value to check.
type markovCase struct {
	name     string
	journeys []journey
	k        int
	collapse bool
	channels []string
	p        float64
	re       []float64
	share    []float64
}

var (
	ex1  = []journey{{"A B C", true, 1}, {"A", false, 1}, {"B C", false, 1}}
	ex2  = []journey{{"A B A", true, 1}}
	ex2b = []journey{{"A B A", true, 1}, {"B", false, 1}}
	ex3  = []journey{{"A A B", true, 1}, {"B B", false, 1}, {"A", false, 1}}
	ex4  = []journey{{"A C", true, 1}, {"B C", false, 1}}
	ex5  = []journey{{"A", true, 1}, {"B B", true, 1}, {"A B B", false, 1}}
	ex6  = []journey{{"G", true, 2}, {"M", true, 1}, {"G M", true, 1}, {"G", false, 1}}
)

var markovCases = []markovCase{
	// docs/references.md §3 EX1; also issue 3 (P 1/3, RE 1/2, 1, 1, shares 0.2/0.4/0.4).
	{"EX1 order 1", ex1, 1, true, []string{"A", "B", "C"}, 1.0 / 3, []float64{0.5, 1, 1}, []float64{0.2, 0.4, 0.4}},
	// docs/references.md §3 EX1: order 2 gives the same P and shares.
	{"EX1 order 2", ex1, 2, true, []string{"A", "B", "C"}, 1.0 / 3, nil, []float64{0.2, 0.4, 0.4}},
	// docs/references.md §3 EX2a.
	{"EX2a loop", ex2, 1, true, []string{"A", "B"}, 1, []float64{1, 0.5}, []float64{2.0 / 3, 1.0 / 3}},
	// docs/references.md §3 EX2b; also issue 3 (P 1/2, shares 2/3, 1/3).
	{"EX2b order 1", ex2b, 1, true, []string{"A", "B"}, 0.5, []float64{1, 0.5}, []float64{2.0 / 3, 1.0 / 3}},
	{"EX2b order 2", ex2b, 2, true, []string{"A", "B"}, 0.5, []float64{1, 1}, []float64{0.5, 0.5}},
	// docs/references.md §3 EX3, collapsed or not.
	{"EX3 order 1 collapsed", ex3, 1, true, []string{"A", "B"}, 1.0 / 3, []float64{0.5, 1}, []float64{1.0 / 3, 2.0 / 3}},
	{"EX3 order 1 repeats kept", ex3, 1, false, []string{"A", "B"}, 1.0 / 3, []float64{0.5, 1}, []float64{1.0 / 3, 2.0 / 3}},
	{"EX3 order 2 collapsed", ex3, 2, true, []string{"A", "B"}, math.NaN(), nil, []float64{0.5, 0.5}},
	{"EX3 order 2 repeats kept", ex3, 2, false, []string{"A", "B"}, math.NaN(), nil, []float64{0.5, 0.5}},
	// docs/references.md §3 EX4; also issue 3 (1/4, 1/4, 1/2 at order 1; 1/2, 0, 1/2 at order 2).
	{"EX4 order 1", ex4, 1, true, []string{"A", "B", "C"}, 0.5, []float64{0.5, 0.5, 1}, []float64{0.25, 0.25, 0.5}},
	{"EX4 order 2", ex4, 2, true, []string{"A", "B", "C"}, math.NaN(), []float64{1, 0, 1}, []float64{0.5, 0, 0.5}},
	// docs/references.md §3 EX5.
	{"EX5 order 1 collapsed", ex5, 1, true, []string{"A", "B"}, 2.0 / 3, []float64{0.75, 0.5}, []float64{0.6, 0.4}},
	{"EX5 order 1 repeats kept", ex5, 1, false, []string{"A", "B"}, 2.0 / 3, []float64{0.75, 0.5}, []float64{0.6, 0.4}},
	{"EX5 order 2 repeats kept", ex5, 2, false, []string{"A", "B"}, math.NaN(), nil, []float64{0.6, 0.4}},
	{"EX5 order 2 collapsed", ex5, 2, true, []string{"A", "B"}, math.NaN(), []float64{0.5, 0.5}, []float64{0.5, 0.5}},
	// docs/references.md §3 EX6 (grouped paths).
	{"EX6", ex6, 1, true, []string{"G", "M"}, 0.8, []float64{0.75, 0.5}, []float64{0.6, 0.4}},
}

// solverModes runs each check with gonum's dense LU and with the sparse
// Gauss–Seidel sweeps (forced by a dense limit of 0).
var solverModes = []struct {
	name  string
	dense int
}{{"dense-lu", denseLimit}, {"sweeps", 0}}

// solveStates returns every state's conversion probability with the given
// states removed, by dense LU or by sweeps.
func solveStates(t *testing.T, ch *chain, dense int, removed []bool) []float64 {
	t.Helper()
	x := make([]float64, ch.n)
	var err error
	if ch.n <= dense {
		err = newDenseSolver(ch).solve(x, removed)
	} else {
		var set []int32
		for i, r := range removed {
			if r {
				set = append(set, int32(i))
			}
		}
		err = ch.sweep(x, [][]int32{set}, nil, 0)
	}
	if err != nil {
		t.Fatal(err)
	}
	return x
}

func markovWith(t *testing.T, counts []TransitionCount, dense int) (MarkovResult, error) {
	t.Helper()
	ch, err := buildChain(counts)
	if err != nil {
		t.Fatalf("buildChain: %v", err)
	}
	return ch.removalEffects(dense)
}

func TestMarkovCheckValues(t *testing.T) {
	const tol = 1e-12
	for _, tc := range markovCases {
		for _, mode := range solverModes {
			t.Run(tc.name+"/"+mode.name, func(t *testing.T) {
				got, err := markovWith(t, countsOf(tc.journeys, tc.k, tc.collapse), mode.dense)
				if err != nil {
					t.Fatal(err)
				}
				if got.Order != tc.k {
					t.Errorf("Order = %d, want %d", got.Order, tc.k)
				}
				if !slices.Equal(got.Channels, tc.channels) {
					t.Errorf("Channels = %q, want %q", got.Channels, tc.channels)
				}
				if !math.IsNaN(tc.p) && !near(got.PConversion, tc.p, tol) {
					t.Errorf("PConversion = %.15g, want %.15g", got.PConversion, tc.p)
				}
				if tc.re != nil && !nearSlice(got.RemovalEffect, tc.re, tol) {
					t.Errorf("RemovalEffect = %.15g, want %.15g", got.RemovalEffect, tc.re)
				}
				if !nearSlice(got.Share, tc.share, tol) {
					t.Errorf("Share = %.15g, want %.15g", got.Share, tc.share)
				}
			})
		}
	}
}

// The public entry point gives the same answers as the forced solver paths.
func TestMarkovPublic(t *testing.T) {
	got, err := Markov(countsOf(ex1, 1, true))
	if err != nil {
		t.Fatal(err)
	}
	// docs/references.md §3 EX1.
	if want := []float64{0.2, 0.4, 0.4}; !nearSlice(got.Share, want, 1e-12) {
		t.Errorf("Share = %v, want %v", got.Share, want)
	}
}

// denseQ returns Q over the chain's states, for fundamental-matrix checks.
func denseQ(ch *chain) *mat.Dense {
	q := mat.NewDense(ch.n, ch.n, nil)
	for i := range ch.n {
		q.Set(i, i, ch.stay[i])
		for e := ch.rowStart[i]; e < ch.rowStart[i+1]; e++ {
			q.Set(i, int(ch.col[e]), q.At(i, int(ch.col[e]))+ch.prob[e])
		}
	}
	return q
}

// docs/references.md §3 EX1 and EX2b [computed; exact]: the fundamental matrix
// N = (I − Q)^−1 and the conversion column of B = N R, per state.
func TestMarkovFundamentalMatrix(t *testing.T) {
	tests := []struct {
		name     string
		journeys []journey
		states   []string
		n        [][]float64
		conv     []float64
	}{
		{"EX1", ex1, []string{StateEntry, "A", "B", "C"},
			[][]float64{{1, 2.0 / 3, 2.0 / 3, 2.0 / 3}, {0, 1, 0.5, 0.5}, {0, 0, 1, 1}, {0, 0, 0, 1}},
			[]float64{1.0 / 3, 0.25, 0.5, 0.5}},
		{"EX2b", ex2b, []string{StateEntry, "A", "B"},
			[][]float64{{1, 1, 1}, {0, 4.0 / 3, 2.0 / 3}, {0, 2.0 / 3, 4.0 / 3}},
			[]float64{0.5, 2.0 / 3, 1.0 / 3}},
	}
	for _, tt := range tests {
		for _, mode := range solverModes {
			t.Run(tt.name+"/"+mode.name, func(t *testing.T) {
				ch, err := buildChain(countsOf(tt.journeys, 1, true))
				if err != nil {
					t.Fatal(err)
				}
				if ch.n != len(tt.states) {
					t.Fatalf("chain has %d states %q, want %q", ch.n, ch.names, tt.states)
				}
				pos := make([]int, len(tt.states))
				for i, s := range tt.states {
					pos[i] = slices.Index(ch.names, s)
					if pos[i] < 0 {
						t.Fatalf("state %q missing from %q", s, ch.names)
					}
				}
				a := denseQ(ch)
				a.Scale(-1, a)
				for i := range ch.n {
					a.Set(i, i, a.At(i, i)+1)
				}
				var nm mat.Dense
				if err := nm.Inverse(a); err != nil {
					t.Fatal(err)
				}
				for i := range tt.states {
					for j := range tt.states {
						if got := nm.At(pos[i], pos[j]); !near(got, tt.n[i][j], 1e-12) {
							t.Errorf("N[%s][%s] = %v, want %v", tt.states[i], tt.states[j], got, tt.n[i][j])
						}
					}
				}
				x := solveStates(t, ch, mode.dense, nil)
				for i, s := range tt.states {
					if got := x[pos[i]]; !near(got, tt.conv[i], 1e-12) {
						t.Errorf("P(conv | %s) = %v, want %v", s, got, tt.conv[i])
					}
				}
			})
		}
	}
}

// The app-navigation chain of stats.stackexchange.com/q/336227 with
// "Notification Center" sent to Exit: purchase probability 11.4 % [published],
// exactly 5/44 [computed, docs/references.md §3]. Open App is @entry; the
// printed probabilities become counts out of 20.
func TestMarkovStackExchangeRemoval(t *testing.T) {
	const social, store, notif = "social", "store", "notification_center"
	printed := []TransitionCount{
		{StateEntry, social, 10}, {StateEntry, store, 10},
		{social, store, 6}, {social, notif, 3}, {social, StateLost, 10}, {social, StateConverted, 1},
		{store, social, 8}, {store, notif, 2}, {store, StateLost, 8}, {store, StateConverted, 2},
		{notif, StateLost, 20},
	}
	for _, mode := range solverModes {
		t.Run("removed/"+mode.name, func(t *testing.T) {
			got, err := markovWith(t, printed, mode.dense)
			if err != nil {
				t.Fatal(err)
			}
			if want := 5.0 / 44; !near(got.PConversion, want, 1e-12) {
				t.Errorf("P = %v, want 5/44 = %v", got.PConversion, want)
			}
			if math.Abs(got.PConversion-0.114) > 0.0005 {
				t.Errorf("P = %v, the source prints 11.4 %%", got.PConversion)
			}
		})
		// The removal operation itself: give Notification Center a row of its
		// own (the answer's default row is not shown; any row will do), then
		// remove it; the conversion probability must be 5/44 again.
		t.Run("removal/"+mode.name, func(t *testing.T) {
			counts := append(slices.Clone(printed[:len(printed)-1]),
				TransitionCount{notif, social, 5}, TransitionCount{notif, store, 5}, TransitionCount{notif, StateConverted, 1})
			ch, err := buildChain(counts)
			if err != nil {
				t.Fatal(err)
			}
			removed := make([]bool, ch.n)
			removed[slices.Index(ch.names, notif)] = true
			x := solveStates(t, ch, mode.dense, removed)
			if want := 5.0 / 44; !near(x[0], want, 1e-12) {
				t.Errorf("P without %s = %v, want 5/44 = %v", notif, x[0], want)
			}
		})
	}
}

// docs/references.md §7 [computed]: transition counts add across buckets, but
// removal-effect credits do not. Bucket 1 = EX1, bucket 2 = EX4, one
// conversion each.
func TestMarkovMergeBuckets(t *testing.T) {
	b1, b2 := countsOf(ex1, 1, true), countsOf(ex4, 1, true)
	merged := append(slices.Clone(b1), b2...) // repeated pairs add
	oneBucket := countsOf(append(slices.Clone(ex1), ex4...), 1, true)
	for _, tt := range []struct {
		name   string
		counts []TransitionCount
	}{{"concatenated counts", merged}, {"one bucket", oneBucket}} {
		t.Run(tt.name, func(t *testing.T) {
			got, err := Markov(tt.counts)
			if err != nil {
				t.Fatal(err)
			}
			if !near(got.PConversion, 0.4, 1e-12) {
				t.Errorf("P = %v, want 2/5", got.PConversion)
			}
			credits := make([]float64, len(got.Share))
			for i, s := range got.Share {
				credits[i] = 2 * s
			}
			if want := []float64{4.0 / 9, 2.0 / 3, 8.0 / 9}; !nearSlice(credits, want, 1e-12) {
				t.Errorf("merged credits = %v, want %v", credits, want)
			}
		})
	}
	r1, err1 := Markov(b1)
	r2, err2 := Markov(b2)
	if err1 != nil || err2 != nil {
		t.Fatal(err1, err2)
	}
	sum := make([]float64, 3)
	for i := range sum {
		sum[i] = r1.Share[i] + r2.Share[i]
	}
	if want := []float64{9.0 / 20, 13.0 / 20, 9.0 / 10}; !nearSlice(sum, want, 1e-12) {
		t.Errorf("sum of per-bucket credits = %v, want %v", sum, want)
	}
}

// The order of the counts does not matter (Markov remembers the last source
// state only as a shortcut).
func TestMarkovCountOrder(t *testing.T) {
	r := rand.New(rand.NewPCG(10, 3))
	counts := countsOf(randomJourneys(r, 60, 6, 6), 2, true)
	want, err := Markov(counts)
	if err != nil {
		t.Fatal(err)
	}
	for range 5 {
		r.Shuffle(len(counts), func(i, j int) { counts[i], counts[j] = counts[j], counts[i] })
		got, err := Markov(counts)
		if err != nil {
			t.Fatal(err)
		}
		if !near(got.PConversion, want.PConversion, 1e-12) || !nearSlice(got.Share, want.Share, 1e-12) {
			t.Errorf("shuffled counts: P %v shares %v, want P %v shares %v", got.PConversion, got.Share, want.PConversion, want.Share)
		}
	}
}

// randomJourneys draws journeys over channels c0..c{channels-1} with
// repeats, for property tests.
func randomJourneys(r *rand.Rand, count, channels, maxLen int) []journey {
	js := make([]journey, count)
	for i := range js {
		n := 1 + r.IntN(maxLen)
		parts := make([]string, n)
		for j := range parts {
			if j > 0 && r.IntN(4) == 0 {
				parts[j] = parts[j-1]
				continue
			}
			parts[j] = fmt.Sprintf("c%d", r.IntN(channels))
		}
		js[i] = journey{strings.Join(parts, " "), r.IntN(3) == 0, 1 + int64(r.IntN(5))}
	}
	return js
}

// docs/references.md §3 "Repeated consecutive touches" [computed]: at order 1,
// collapsing repeats changes neither P(conv) nor any removal effect.
func TestMarkovCollapseOrder1(t *testing.T) {
	r := rand.New(rand.NewPCG(3, 1))
	for trial := range 50 {
		js := randomJourneys(r, 1+r.IntN(12), 2+r.IntN(4), 6)
		a, errA := Markov(countsOf(js, 1, true))
		b, errB := Markov(countsOf(js, 1, false))
		if !errors.Is(errA, errB) && (errA != nil || errB != nil) {
			t.Fatalf("trial %d: errors differ: %v vs %v", trial, errA, errB)
		}
		if !near(a.PConversion, b.PConversion, 1e-12) || !nearSlice(a.RemovalEffect, b.RemovalEffect, 1e-12) {
			t.Errorf("trial %d: collapsed P %v RE %v, repeats kept P %v RE %v", trial,
				a.PConversion, a.RemovalEffect, b.PConversion, b.RemovalEffect)
		}
	}
}

// powerConversion is an independent reference: it builds the full
// transition matrix straight from the counts (absorbing @converted and @lost,
// every transition into a removed state redirected to @lost), squares it
// 60 times and reads P^∞[@entry][@converted]. It shares no code
// with buildChain or the solvers.
func powerConversion(counts []TransitionCount, removed func(state string) bool) float64 {
	idx := map[string]int{StateEntry: 0, StateConverted: 1, StateLost: 2}
	for _, c := range counts {
		for _, s := range []string{c.From, c.To} {
			if _, ok := idx[s]; !ok {
				idx[s] = len(idx)
			}
		}
	}
	n := len(idx)
	p := mat.NewDense(n, n, nil)
	rowTotal := make([]float64, n)
	for _, c := range counts {
		rowTotal[idx[c.From]] += float64(c.Count)
	}
	for _, c := range counts {
		to := idx[c.To]
		if removed != nil && removed(c.To) {
			to = idx[StateLost]
		}
		from := idx[c.From]
		p.Set(from, to, p.At(from, to)+float64(c.Count)/rowTotal[from])
	}
	p.Set(1, 1, 1)
	p.Set(2, 2, 1)
	// 2^60 steps: far beyond the length of any journey in these tests. The
	// value must have settled between 2^59 and 2^60 steps.
	var sq mat.Dense
	var before float64
	for range 60 {
		before = p.At(0, 1)
		sq.Mul(p, p)
		p.Copy(&sq)
	}
	if math.Abs(p.At(0, 1)-before) > 1e-15 {
		return math.NaN() // not settled: fail the comparison
	}
	return p.At(0, 1)
}

// randomCounts draws arbitrary transition counts between random tuples of
// the given order (not necessarily consistent journeys), for solver checks.
func randomCounts(r *rand.Rand, channels, order, states int) []TransitionCount {
	names := []string{StateEntry}
	seen := map[string]bool{}
	possible, power := 0, 1
	for range order {
		power *= channels
		possible += power
	}
	for len(names) < min(states, possible)+1 {
		k := 1 + r.IntN(order)
		tuple := make([]string, k)
		for i := range tuple {
			tuple[i] = fmt.Sprintf("c%d", r.IntN(channels))
		}
		if s := StateOf(tuple); !seen[s] {
			seen[s] = true
			names = append(names, s)
		}
	}
	var counts []TransitionCount
	for _, from := range names {
		for range 1 + r.IntN(4) {
			counts = append(counts, TransitionCount{from, names[1+r.IntN(len(names)-1)], int64(1 + r.IntN(9))})
		}
		if from != StateEntry || r.IntN(5) == 0 {
			switch r.IntN(3) {
			case 0:
				counts = append(counts, TransitionCount{from, StateConverted, int64(1 + r.IntN(4))})
			case 1:
				counts = append(counts, TransitionCount{from, StateLost, int64(1 + r.IntN(4))})
			}
		}
	}
	return counts
}

// Cross-check on random chains (fixed seed): gonum dense LU, the sparse
// sweeps and repeated squaring of the full matrix agree to 1e-9 on P and on
// every removal effect.
func TestMarkovSolversAgree(t *testing.T) {
	r := rand.New(rand.NewPCG(7, 11))
	trials := 60
	if testing.Short() {
		trials = 20
	}
	for trial := range trials {
		var counts []TransitionCount
		switch trial % 3 {
		case 0:
			counts = randomCounts(r, 2+r.IntN(4), 1+r.IntN(3), 3+r.IntN(25))
		case 1:
			counts = countsOf(randomJourneys(r, 5+r.IntN(30), 2+r.IntN(4), 7), 1+r.IntN(3), r.IntN(2) == 0)
		case 2:
			// Enough channels for the four-systems-at-a-time sweep kernel.
			counts = countsOf(randomJourneys(r, 40+r.IntN(40), 9+r.IntN(4), 5), 1+r.IntN(2), true)
		}
		dense, errD := markovWith(t, counts, denseLimit)
		sweeps, errS := markovWith(t, counts, 0)
		if errD != errS {
			t.Fatalf("trial %d: dense error %v, sweeps error %v", trial, errD, errS)
		}
		p := powerConversion(counts, nil)
		if !near(dense.PConversion, p, 1e-9) || !near(sweeps.PConversion, p, 1e-9) {
			t.Errorf("trial %d: P dense %v, sweeps %v, power %v", trial, dense.PConversion, sweeps.PConversion, p)
		}
		if p == 0 {
			if !errors.Is(errD, ErrNoConversionPath) {
				t.Errorf("trial %d: P = 0 but error %v", trial, errD)
			}
			continue
		}
		for c, name := range dense.Channels {
			pc := powerConversion(counts, func(s string) bool { return slices.Contains(StateChannels(s), name) })
			want := max(0, 1-pc/p)
			if !near(dense.RemovalEffect[c], want, 1e-9) || !near(sweeps.RemovalEffect[c], want, 1e-9) {
				t.Errorf("trial %d: RE(%s) dense %v, sweeps %v, power %v", trial, name,
					dense.RemovalEffect[c], sweeps.RemovalEffect[c], want)
			}
		}
	}
}

// For counts from complete journeys the observed visit counts solve the
// chain's forward equations (every visit to a state is entered once and left
// once), so P(conv) equals the observed conversion rate at any order, with or
// without collapsing [derived; consistent with every P of docs/references.md §3:
// EX1 1/3, EX2b 1/2, EX5 2/3, EX6 4/5].
func TestMarkovConversionRateIdentity(t *testing.T) {
	r := rand.New(rand.NewPCG(5, 8))
	for trial := range 30 {
		js := randomJourneys(r, 10+r.IntN(60), 3+r.IntN(8), 8)
		var journeys, conversions int64
		for _, j := range js {
			journeys += j.times
			if j.converted {
				conversions += j.times
			}
		}
		k, collapse := 1+r.IntN(4), r.IntN(2) == 0
		for _, mode := range solverModes {
			got, err := markovWith(t, countsOf(js, k, collapse), mode.dense)
			if conversions == 0 {
				if !errors.Is(err, ErrNoConversionPath) {
					t.Errorf("trial %d: no conversions, error %v", trial, err)
				}
				continue
			}
			if want := float64(conversions) / float64(journeys); !near(got.PConversion, want, 1e-10) {
				t.Errorf("trial %d %s order %d: P = %.15g, want %d/%d", trial, mode.name, k, got.PConversion, conversions, journeys)
			}
		}
	}
}

func TestMarkovErrors(t *testing.T) {
	tests := []struct {
		name   string
		counts []TransitionCount
		is     error // nil: any non-nil error
	}{
		{"no counts", nil, ErrNoConversionPath},
		{"nobody converts", countsOf([]journey{{"A B", false, 3}}, 1, true), ErrNoConversionPath},
		{"conversion unreachable", []TransitionCount{{StateEntry, "A", 1}, {"A", StateLost, 1}, {"B", StateConverted, 1}}, ErrNoConversionPath},
		{"only empty paths convert", countsOf([]journey{{"", true, 2}, {"A", false, 1}}, 1, true), ErrNoRemovalEffect},
		{"negative count", []TransitionCount{{StateEntry, "A", -1}}, nil},
		{"out of conversion", []TransitionCount{{StateConverted, "A", 1}}, nil},
		{"out of null", []TransitionCount{{StateLost, "A", 1}}, nil},
		{"into start", []TransitionCount{{"A", StateEntry, 1}}, nil},
		{"empty state", []TransitionCount{{StateEntry, "", 1}}, nil},
		{"unknown reserved state", []TransitionCount{{"\x00exit", "A", 1}}, nil},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			_, err := Markov(tt.counts)
			if err == nil || (tt.is != nil && !errors.Is(err, tt.is)) {
				t.Errorf("error = %v, want %v", err, tt.is)
			}
		})
	}
}
