package pathstats

import (
	"bytes"
	"errors"
	"math/rand"
	"slices"
	"strconv"
	"testing"
)

// observeLetters feeds every letter of stream with weight 1.
func observeLetters(t *TopK, stream string) {
	for _, r := range stream {
		t.Observe(string(r), 1)
	}
}

func topKOf(m int, stream string) *TopK {
	t := NewTopK(m)
	observeLetters(t, stream)
	return t
}

func TestTopKSpaceSavingExamples(t *testing.T) {
	tests := []struct {
		name   string
		m      int
		stream string
		want   []Item
	}{
		// docs/references.md §6 Example 1 [computed]: m = 3, stream a b a c a b d a b e,
		// final a:4 (ε 0), b:3 (ε 0), e:3 (ε 2).
		{"example 1", 3, "abacabdabe", []Item{{"a", 4, 0}, {"b", 3, 0}, {"e", 3, 2}}},
		// docs/references.md §6 Example 1 at t = 7: d evicts c (min 1), d = 2, ε = 1.
		{"example 1 at t=7", 3, "abacabd", []Item{{"a", 3, 0}, {"b", 2, 0}, {"d", 2, 1}}},
		// docs/references.md §6 Example 2 [computed]: m = 3, stream aaabbcaadbbeafaab,
		// final a:8 (ε 0), b:5 (ε 0), f:4 (ε 3).
		{"example 2", 3, "aaabbcaadbbeafaab", []Item{{"a", 8, 0}, {"b", 5, 0}, {"f", 4, 3}}},
		// Tie-break (doc.go): a:1 and b:1 tie, the larger key b is evicted.
		{"tie evicts larger key", 2, "abc", []Item{{"c", 2, 1}, {"a", 1, 0}}},
		{"not full is exact", 5, "abcab", []Item{{"a", 2, 0}, {"b", 2, 0}, {"c", 1, 0}}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			s := topKOf(tt.m, tt.stream)
			if got := s.Items(); !slices.Equal(got, tt.want) {
				t.Errorf("Items() = %v, want %v", got, tt.want)
			}
			if got, want := s.Total(), int64(len(tt.stream)); got != want {
				t.Errorf("Total() = %d, want %d", got, want)
			}
		})
	}
	// docs/references.md §6 Example 1: guaranteed top-2 = {a, b} (4 − 0 >= 3, 3 − 0 >= 3);
	// min = 3 <= 10/3.
	s := topKOf(3, "abacabdabe")
	if got, want := s.Guaranteed(2), []Item{{"a", 4, 0}, {"b", 3, 0}}; !slices.Equal(got, want) {
		t.Errorf("Guaranteed(2) = %v, want %v", got, want)
	}
	if got := s.UnlistedMax(); got != 3 {
		t.Errorf("UnlistedMax() = %d, want 3", got)
	}
	// e's lower bound 1 is below the 4th count (UnlistedMax 3): only a and b are certain.
	if got, want := s.Guaranteed(3), []Item{{"a", 4, 0}, {"b", 3, 0}}; !slices.Equal(got, want) {
		t.Errorf("Guaranteed(3) = %v, want %v", got, want)
	}
}

func TestTopKWeightedEqualsRepeated(t *testing.T) {
	// Observe(x, n) is n unit updates of x (doc.go); a weighted run and the
	// repeated run end in the same summary.
	rng := rand.New(rand.NewSource(13))
	weighted, repeated := NewTopK(8), NewTopK(8)
	for range 2000 {
		key := "k" + strconv.Itoa(rng.Intn(40))
		n := int64(1 + rng.Intn(5))
		weighted.Observe(key, n)
		for range n {
			repeated.Observe(key, 1)
		}
	}
	if got, want := weighted.Items(), repeated.Items(); !slices.Equal(got, want) {
		t.Errorf("weighted Items() = %v, repeated %v", got, want)
	}
	weighted.Observe("k1", 0)
	if got, want := weighted.Total(), repeated.Total(); got != want {
		t.Errorf("Total() after a zero weight = %d, want %d", got, want)
	}
}

// zipfStream returns a fixed-seed stream of keys drawn from a Zipf law, with
// weights in [1, maxWeight].
func zipfStream(seed int64, n, keys int, maxWeight int64) ([]string, []int64) {
	rng := rand.New(rand.NewSource(seed))
	z := rand.NewZipf(rng, 1.2, 1, uint64(keys-1))
	names := make([]string, keys)
	for i := range names {
		names[i] = "product_view > basket_add > p" + strconv.Itoa(i)
	}
	stream := make([]string, n)
	weights := make([]int64, n)
	for i := range stream {
		stream[i] = names[z.Uint64()]
		weights[i] = 1 + rng.Int63n(maxWeight)
	}
	return stream, weights
}

// checkInvariants checks (I1)–(I4) of doc.go against exact counts.
func checkInvariants(t *testing.T, label string, s *TopK, exact map[string]int64, observeOnly bool) {
	t.Helper()
	var n int64
	for _, f := range exact {
		n += f
	}
	if s.Total() != n {
		t.Fatalf("%s: Total() = %d, want %d", label, s.Total(), n)
	}
	items := s.Items()
	if len(items) > s.Cap() {
		t.Fatalf("%s: %d items above capacity %d", label, len(items), s.Cap())
	}
	u := s.UnlistedMax()
	listed := map[string]bool{}
	var sum int64
	for _, it := range items {
		listed[it.Key] = true
		sum += it.Count
		f := exact[it.Key]
		if !(it.Count-it.Error <= f && f <= it.Count) { // (I1)
			t.Fatalf("%s: %q count %d error %d, true %d", label, it.Key, it.Count, it.Error, f)
		}
		if it.Error > u || it.Count < u { // (I3)
			t.Fatalf("%s: %q count %d error %d against UnlistedMax %d", label, it.Key, it.Count, it.Error, u)
		}
	}
	for k, f := range exact {
		if !listed[k] && f > u { // (I2)
			t.Fatalf("%s: %q with true count %d > UnlistedMax %d is not listed", label, k, f, u)
		}
	}
	if sum > n || (observeOnly && sum != n) { // (I4)
		t.Fatalf("%s: Σcounts = %d, N = %d (observe only %v)", label, sum, n, observeOnly)
	}
	if len(items) == s.Cap() && u*int64(s.Cap()) > n { // min <= N/m
		t.Fatalf("%s: UnlistedMax %d > N/m = %d/%d", label, u, n, s.Cap())
	}
}

func TestTopKInvariantsRandomStreams(t *testing.T) {
	for _, tc := range []struct {
		seed      int64
		m, keys   int
		maxWeight int64
	}{
		{1, 5, 50, 1}, {2, 20, 500, 1}, {3, 20, 500, 9}, {4, 64, 5000, 3}, {5, 1, 10, 2},
	} {
		stream, weights := zipfStream(tc.seed, 5000, tc.keys, tc.maxWeight)
		s := NewTopK(tc.m)
		exact := map[string]int64{}
		for i, k := range stream {
			s.Observe(k, weights[i])
			exact[k] += weights[i]
			if i%97 == 0 {
				checkInvariants(t, "seed "+strconv.FormatInt(tc.seed, 10), s, exact, true)
			}
		}
		checkInvariants(t, "seed "+strconv.FormatInt(tc.seed, 10), s, exact, true)
	}
}

func TestTopKMergeExamples(t *testing.T) {
	// The inputs of docs/references.md §7's Misra–Gries examples, built as Space-Saving
	// summaries with m = 2 from streams. TopK's merge is the Space-Saving form,
	// not MG, so the §7 Misra–Gries outputs ({a:3, c:1} and {a:2, c:1}, lower-bound
	// counters) do not apply; the wants below are worked by hand from the rule
	// in doc.go [computed by hand], and the true counts are given to show each
	// interval [Count − Error, Count] holds them.
	tests := []struct {
		name    string
		a, b    string
		want    []Item
		wantMax int64 // UnlistedMax after the merge
	}{
		// {a:3, b:1} (U 1) ⊕ {c:2, a:1} (U 1): a 3+1 ε0, b 1+1 ε1, c 2+1 ε1;
		// keep 2: a:4 ε0, c:3 ε1; dropped b:2. True: a 4, b 1, c 2; N = 7 = Σ.
		{"first", "aaab", "cca", []Item{{"a", 4, 0}, {"c", 3, 1}}, 3},
		// {a:5, b:2} (U 2) ⊕ {c:4, b:1} (U 1): a 5+1 ε1, b 2+1 ε0, c 4+2 ε2;
		// keep 2: a:6 ε1, c:6 ε2; dropped b:3. True: a 5, b 3, c 4; N = 12 = Σ.
		{"second", "aaaaabb", "ccccb", []Item{{"a", 6, 1}, {"c", 6, 2}}, 6},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			for _, order := range [][2]string{{tt.a, tt.b}, {tt.b, tt.a}} {
				s := topKOf(2, order[0])
				s.Merge(topKOf(2, order[1]))
				if got := s.Items(); !slices.Equal(got, tt.want) {
					t.Errorf("%s ⊕ %s: Items() = %v, want %v", order[0], order[1], got, tt.want)
				}
				if got := s.UnlistedMax(); got != tt.wantMax {
					t.Errorf("%s ⊕ %s: UnlistedMax() = %d, want %d", order[0], order[1], got, tt.wantMax)
				}
				if got, want := s.Total(), int64(len(tt.a)+len(tt.b)); got != want {
					t.Errorf("Total() = %d, want %d", got, want)
				}
			}
		})
	}
}

func TestTopKMergeRandomPartitions(t *testing.T) {
	// Streams split over partitions, summarised separately and merged in a
	// random order (with occasional smaller capacities and further updates
	// after merging) keep (I1)–(I4) against the exact counts of everything
	// observed (doc.go, Merge derivation).
	rng := rand.New(rand.NewSource(17))
	for trial := range 40 {
		m := 2 + rng.Intn(30)
		stream, weights := zipfStream(int64(100+trial), 3000, 20+rng.Intn(2000), 1+rng.Int63n(4))
		parts := 1 + rng.Intn(8)
		summaries := make([]*TopK, parts)
		wantCap := m + 10
		for i := range summaries {
			c := m
			if rng.Intn(3) == 0 {
				c = m + rng.Intn(10) // larger capacities merge down to the smallest
			}
			summaries[i] = NewTopK(c)
			wantCap = min(wantCap, c)
		}
		exact := map[string]int64{}
		for i, k := range stream {
			summaries[rng.Intn(parts)].Observe(k, weights[i])
			exact[k] += weights[i]
		}
		for len(summaries) > 1 {
			i, j := rng.Intn(len(summaries)), rng.Intn(len(summaries)-1)
			if j >= i {
				j++
			}
			summaries[i].Merge(summaries[j])
			summaries = slices.Delete(summaries, j, j+1)
		}
		s := summaries[0]
		label := "trial " + strconv.Itoa(trial)
		if s.Cap() != wantCap {
			t.Fatalf("%s: capacity %d, want the smallest input capacity %d", label, s.Cap(), wantCap)
		}
		checkInvariants(t, label, s, exact, parts == 1)
		more, moreWeights := zipfStream(int64(900+trial), 500, 100, 3)
		for i, k := range more {
			s.Observe(k, moreWeights[i])
			exact[k] += moreWeights[i]
		}
		checkInvariants(t, label+" after more updates", s, exact, parts == 1)
	}
}

func TestTopKMergeProperties(t *testing.T) {
	streamA, wA := zipfStream(21, 2000, 300, 3)
	streamB, wB := zipfStream(22, 1500, 300, 3)
	build := func(m int, stream []string, w []int64) *TopK {
		s := NewTopK(m)
		for i, k := range stream {
			s.Observe(k, w[i])
		}
		return s
	}
	t.Run("commutative", func(t *testing.T) {
		ab, ba := build(16, streamA, wA), build(16, streamB, wB)
		ab.Merge(build(16, streamB, wB))
		ba.Merge(build(16, streamA, wA))
		if !slices.Equal(ab.Items(), ba.Items()) || ab.Total() != ba.Total() {
			t.Errorf("A⊕B = %v, B⊕A = %v", ab.Items(), ba.Items())
		}
	})
	t.Run("empty is identity", func(t *testing.T) {
		a := build(16, streamA, wA)
		want := a.Items()
		a.Merge(NewTopK(16))
		a.Merge(nil)
		if got, wantN := a.Total(), build(16, streamA, wA).Total(); !slices.Equal(a.Items(), want) || got != wantN {
			t.Errorf("A⊕∅ = %v (N %d), want %v (N %d)", a.Items(), got, want, wantN)
		}
		e := NewTopK(16)
		e.Merge(build(16, streamA, wA))
		if got := e.Items(); !slices.Equal(got, want) {
			t.Errorf("∅⊕A = %v, want %v", got, want)
		}
	})
	t.Run("exact while the union fits", func(t *testing.T) {
		a, b := topKOf(10, "aabbbcd"), topKOf(10, "ddeeef")
		a.Merge(b)
		want := topKOf(10, "aabbbcdddeeef").Items()
		if got := a.Items(); !slices.Equal(got, want) {
			t.Errorf("merged = %v, single summary = %v", got, want)
		}
	})
	t.Run("self merge doubles", func(t *testing.T) {
		a := topKOf(3, "abacabdabe")
		a.Merge(a)
		// Example 1 doubled: a:8 ε0, b:6 ε0, e:6 ε4, N = 20.
		if got, want := a.Items(), []Item{{"a", 8, 0}, {"b", 6, 0}, {"e", 6, 4}}; !slices.Equal(got, want) || a.Total() != 20 {
			t.Errorf("A⊕A = %v (N %d), want %v (N 20)", got, a.Total(), want)
		}
	})
	t.Run("capacity shrinks to the smaller", func(t *testing.T) {
		for _, caps := range [][2]int{{3, 5}, {5, 3}} {
			a, b := build(caps[0], streamA, wA), build(caps[1], streamB, wB)
			a.Merge(b)
			if a.Cap() != 3 || a.Len() != 3 {
				t.Errorf("caps %v: merged Cap() = %d Len() = %d, want 3, 3", caps, a.Cap(), a.Len())
			}
		}
	})
}

func TestTopKBinaryGolden(t *testing.T) {
	// Example 1 (a:4 ε0, b:3 ε0, e:3 ε2, N = 10, m = 3) in the doc.go layout:
	// version 1, capacity 3, N 10, k 3, then "a" 4 0, "b" step 1 0, "e" step 0 2.
	want := []byte{1, 3, 10, 3, 1, 'a', 4, 0, 1, 'b', 1, 0, 1, 'e', 0, 2}
	got, err := topKOf(3, "abacabdabe").MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(got, want) {
		t.Errorf("MarshalBinary() = %v, want %v", got, want)
	}
}

func TestTopKBinaryRoundTrip(t *testing.T) {
	stream, w := zipfStream(31, 4000, 800, 4)
	for _, m := range []int{1, 7, 50, 2000} {
		s := NewTopK(m)
		for i, k := range stream[:3000] {
			s.Observe(k, w[i])
		}
		b, err := s.MarshalBinary()
		if err != nil {
			t.Fatal(err)
		}
		var d TopK
		if err := d.UnmarshalBinary(b); err != nil {
			t.Fatalf("m=%d: UnmarshalBinary: %v", m, err)
		}
		if !slices.Equal(d.Items(), s.Items()) || d.Total() != s.Total() || d.Cap() != s.Cap() {
			t.Fatalf("m=%d: decoded %v (N %d, cap %d), want %v (N %d, cap %d)",
				m, d.Items(), d.Total(), d.Cap(), s.Items(), s.Total(), s.Cap())
		}
		// The decoded summary continues exactly like the original.
		for i, k := range stream[3000:] {
			s.Observe(k, w[3000+i])
			d.Observe(k, w[3000+i])
		}
		if !slices.Equal(d.Items(), s.Items()) {
			t.Fatalf("m=%d: after more updates decoded %v, original %v", m, d.Items(), s.Items())
		}
	}
}

func TestTopKUnmarshalRejects(t *testing.T) {
	valid := []byte{1, 3, 10, 3, 1, 'a', 4, 0, 1, 'b', 1, 0, 1, 'e', 0, 2}
	tests := []struct {
		name string
		b    []byte
	}{
		{"empty", nil},
		{"version 2", append([]byte{2}, valid[1:]...)},
		{"truncated", valid[:len(valid)-1]},
		{"trailing byte", append(slices.Clone(valid), 0)},
		{"capacity 0", []byte{1, 0, 0, 0}},
		{"more counters than capacity", []byte{1, 1, 2, 2, 1, 'a', 1, 0, 1, 'b', 0, 0}},
		{"counts above total", []byte{1, 3, 5, 3, 1, 'a', 4, 0, 1, 'b', 1, 0, 1, 'e', 0, 2}},
		{"error above count", []byte{1, 3, 10, 1, 1, 'a', 4, 5}},
		{"zero count", []byte{1, 3, 4, 2, 1, 'a', 4, 0, 1, 'b', 4, 0}},
		{"count step above previous", []byte{1, 3, 4, 2, 1, 'a', 4, 0, 1, 'b', 5, 0}},
		{"equal counts out of key order", []byte{1, 2, 6, 2, 1, 'b', 3, 0, 1, 'a', 0, 0}},
		{"repeated key", []byte{1, 2, 6, 2, 1, 'a', 4, 0, 1, 'a', 2, 0}},
		{"not full with error", []byte{1, 3, 4, 1, 1, 'a', 4, 1}},
		{"not full with lost weight", []byte{1, 3, 5, 1, 1, 'a', 4, 0}},
		{"full with error above the smallest count", []byte{1, 2, 12, 2, 1, 'a', 8, 5, 1, 'b', 4, 0}},
		{"key longer than input", []byte{1, 3, 10, 1, 9, 'a', 4, 0}},
		{"counter count beyond input", []byte{1, 3, 10, 3, 1, 'a', 4, 0}},
		{"overlong varint", []byte{1, 0x80, 0x80, 0x80, 0x80, 0x80, 0x80, 0x80, 0x80, 0x80, 0x80, 0x01}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			before := topKOf(2, "xyx")
			if err := before.UnmarshalBinary(tt.b); !errors.Is(err, ErrCorrupt) {
				t.Fatalf("UnmarshalBinary(%v) = %v, want ErrCorrupt", tt.b, err)
			}
			if got, want := before.Items(), topKOf(2, "xyx").Items(); !slices.Equal(got, want) {
				t.Errorf("failed UnmarshalBinary changed the summary to %v", got)
			}
		})
	}
}

func TestNewTopKPanicsOnBadCapacity(t *testing.T) {
	for _, m := range []int{0, -1, MaxTopKCapacity + 1} {
		func() {
			defer func() {
				if recover() == nil {
					t.Errorf("NewTopK(%d) did not panic", m)
				}
			}()
			NewTopK(m)
		}()
	}
}

func BenchmarkTopKObserve(b *testing.B) {
	for _, bc := range []struct {
		name    string
		m, keys int
	}{
		{"m=100/keys=1e4", 100, 10_000},
		{"m=1000/keys=1e5", 1000, 100_000},
	} {
		b.Run(bc.name, func(b *testing.B) {
			stream, _ := zipfStream(41, 1<<16, bc.keys, 1)
			s := NewTopK(bc.m)
			b.ReportAllocs()
			i := 0
			for b.Loop() {
				s.Observe(stream[i&(len(stream)-1)], 1)
				i++
			}
			b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "items/s")
		})
	}
}

func BenchmarkTopKMerge(b *testing.B) {
	stream, w := zipfStream(43, 20000, 20000, 2)
	x, y := NewTopK(1000), NewTopK(1000)
	for i, k := range stream {
		if i%2 == 0 {
			x.Observe(k, w[i])
		} else {
			y.Observe(k, w[i])
		}
	}
	xb, _ := x.MarshalBinary()
	b.ReportAllocs()
	for b.Loop() {
		var dst TopK
		if err := dst.UnmarshalBinary(xb); err != nil {
			b.Fatal(err)
		}
		dst.Merge(y)
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "merges/s")
}
