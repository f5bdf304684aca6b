package credit

import (
	"errors"
	"math"
	"math/bits"
	"math/rand/v2"
	"slices"
	"testing"
)

// threeChannel is the worked example of docs/references.md §4 [computed;
// exact]: journeys and conversions per exact channel set over A, B, C.
var threeChannel = []Coalition{
	{Channels: []string{"A"}, Journeys: 100, Conversions: 10},
	{Channels: []string{"B"}, Journeys: 60, Conversions: 6},
	{Channels: []string{"C"}, Journeys: 80, Conversions: 4},
	{Channels: []string{"A", "B"}, Journeys: 60, Conversions: 12},
	{Channels: []string{"A", "C"}, Journeys: 30, Conversions: 6},
	{Channels: []string{"B", "C"}, Journeys: 20, Conversions: 3},
	{Channels: []string{"A", "B", "C"}, Journeys: 30, Conversions: 9},
}

// maskOf gives the bitmask of a sorted channel list over players A, B, C...
func maskOf(channels []string, players []string) uint32 {
	var m uint32
	for _, c := range channels {
		m |= 1 << slices.Index(players, c)
	}
	return m
}

// exactSet returns R_T (conversions) and journeys per exact mask.
func exactSet(cs []Coalition, players []string) (conv, journeys map[uint32]float64) {
	conv, journeys = map[uint32]float64{}, map[uint32]float64{}
	for _, c := range cs {
		m := maskOf(c.Channels, players)
		conv[m] += float64(c.Conversions)
		journeys[m] += float64(c.Journeys)
	}
	return conv, journeys
}

// subsetSum is the value function of Zhao, Mahboobi & Bagheri (2018):
// v(S) = Σ_{T ⊆ S} R_T.
func subsetSum(r map[uint32]float64) func(uint32) float64 {
	return func(s uint32) float64 {
		var v float64
		for t, x := range r {
			if t&^s == 0 {
				v += x
			}
		}
		return v
	}
}

// docs/references.md §4, three-channel example, three value functions
// [computed; exact]; formula Shapley (1953).
func TestShapleyValuesThreeChannel(t *testing.T) {
	players := []string{"A", "B", "C"}
	conv, journeys := exactSet(threeChannel, players)
	tests := []struct {
		name string
		v    func(uint32) float64
		want []float64
	}{
		{"subset-sum", subsetSum(conv), []float64{22, 33.0 / 2, 23.0 / 2}},
		{"exact-set", func(s uint32) float64 { return conv[s] }, []float64{20.0 / 3, 19.0 / 6, -5.0 / 6}},
		{"conversion-rate exact set", func(s uint32) float64 {
			if journeys[s] == 0 {
				return 0
			}
			return conv[s] / journeys[s]
		}, []float64{1.0 / 8, 1.0 / 10, 3.0 / 40}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if got := ShapleyValues(3, tt.v); !nearSlice(got, tt.want, 1e-12) {
				t.Errorf("φ = %v, want %v", got, tt.want)
			}
		})
	}
}

// docs/references.md §4, touchledger's shapley [computed; exact]:
// v(S) = conversion rate of the journeys whose channel set lies inside S.
func TestShapleyConversionRateInsideS(t *testing.T) {
	got, err := Shapley(threeChannel, 15, "other")
	if err != nil {
		t.Fatal(err)
	}
	if want := []string{"A", "B", "C"}; !slices.Equal(got.Channels, want) {
		t.Fatalf("Channels = %q, want %q", got.Channels, want)
	}
	if want := []float64{131027.0 / 2106720, 46517.0 / 842688, 59761.0 / 4213440}; !nearSlice(got.Phi, want, 1e-12) {
		t.Errorf("Phi = %.15g, want %.15g", got.Phi, want)
	}
	var sum float64
	for _, p := range got.Phi {
		sum += p
	}
	if !near(sum, 5.0/38, 1e-12) {
		t.Errorf("Σφ = %v, want v(N) = 5/38", sum)
	}
	credits := make([]float64, 3)
	for i, s := range got.Share {
		credits[i] = 50 * s
	}
	if want := []float64{131027.0 / 5544, 232585.0 / 11088, 59761.0 / 11088}; !nearSlice(credits, want, 1e-12) {
		t.Errorf("credits of 50 = %.9f, want %.9f (≈ 23.634019, 20.976281, 5.389701)", credits, want)
	}
	// Support: journeys that touched each channel, summed from the table.
	if want := []int64{220, 170, 160}; !slices.Equal(got.Journeys, want) {
		t.Errorf("Journeys = %v, want %v", got.Journeys, want)
	}
}

// permutationShapley is the definition of Shapley (1953) itself: the
// average marginal contribution over all n! orders. Independent of
// ShapleyValues' subset formula.
func permutationShapley(n int, v func(uint32) float64) []float64 {
	phi := make([]float64, n)
	order := make([]int, n)
	for i := range order {
		order[i] = i
	}
	count := 0
	var permute func(k int)
	permute = func(k int) {
		if k == n {
			var s uint32
			for _, p := range order {
				phi[p] += v(s|1<<p) - v(s)
				s |= 1 << p
			}
			count++
			return
		}
		for i := k; i < n; i++ {
			order[k], order[i] = order[i], order[k]
			permute(k + 1)
			order[k], order[i] = order[i], order[k]
		}
	}
	permute(0)
	for i := range phi {
		phi[i] /= float64(count)
	}
	return phi
}

func randomGame(r *rand.Rand, n int) []float64 {
	v := make([]float64, 1<<n)
	for m := 1; m < len(v); m++ {
		v[m] = r.NormFloat64()
	}
	return v
}

// Shapley (1953): ShapleyValues matches the permutation definition, and
// satisfies efficiency, symmetry and the null-player property on random
// games (fixed seed).
func TestShapleyAxioms(t *testing.T) {
	r := rand.New(rand.NewPCG(4, 9))
	for trial := range 40 {
		n := 1 + r.IntN(6)
		table := randomGame(r, n)
		v := func(m uint32) float64 { return table[m] }
		phi := ShapleyValues(n, v)
		if want := permutationShapley(n, v); !nearSlice(phi, want, 1e-12) {
			t.Fatalf("trial %d n=%d: φ %v, permutation definition %v", trial, n, phi, want)
		}
		var sum float64
		for _, p := range phi {
			sum += p
		}
		if !near(sum, table[len(table)-1], 1e-12) {
			t.Errorf("trial %d: efficiency Σφ = %v, v(N) = %v", trial, sum, table[len(table)-1])
		}
	}
	for trial := range 20 {
		n := 3 + r.IntN(8)
		base := randomGame(r, n)
		i, j := 0, 1+r.IntN(n-1)
		// Symmetry: v depends on i and j only through how many of them S
		// holds, so φ_i = φ_j.
		swap := func(m uint32) uint32 {
			bi, bj := m>>i&1, m>>uint(j)&1
			return m&^(1<<i|1<<uint(j)) | bj<<i | bi<<uint(j)
		}
		sym := func(m uint32) float64 { return base[m] + base[swap(m)] }
		phi := ShapleyValues(n, sym)
		if !near(phi[i], phi[j], 1e-12) {
			t.Errorf("trial %d: symmetric players %d, %d get %v, %v", trial, i, j, phi[i], phi[j])
		}
		// Null player: j never changes the value, so φ_j = 0.
		null := func(m uint32) float64 { return base[m&^(1<<uint(j))] }
		if phi := ShapleyValues(n, null); math.Abs(phi[j]) > 1e-12 {
			t.Errorf("trial %d: null player %d gets %v", trial, j, phi[j])
		}
	}
}

// Zhao, Mahboobi & Bagheri (2018) identity (docs/references.md §4, item 1):
// with v(S) = Σ_{T ⊆ S} R_T the Shapley value equals splitting each
// coalition's conversions evenly over its channels. Checked on the worked
// example (A 22 = 10 + 12/2 + 6/2 + 9/3) and on random data.
func TestShapleyZhaoIdentity(t *testing.T) {
	r := rand.New(rand.NewPCG(12, 1))
	for trial := range 30 {
		n := 1 + r.IntN(12)
		rt := map[uint32]float64{}
		for range 1 + r.IntN(40) {
			rt[uint32(1+r.IntN(1<<n-1))] += float64(r.IntN(50))
		}
		if trial == 0 {
			n = 3
			rt, _ = exactSet(threeChannel, []string{"A", "B", "C"})
		}
		split := make([]float64, n)
		for m, x := range rt {
			k := float64(bits.OnesCount32(m))
			for i := range n {
				if m>>i&1 == 1 {
					split[i] += x / k
				}
			}
		}
		// A table lookup keeps the 2^n calls cheap.
		table := make([]float64, 1<<n)
		for m, x := range rt {
			table[m] += x
		}
		for i := range n {
			for m := range table {
				if m>>i&1 == 1 {
					table[m] += table[m^1<<i]
				}
			}
		}
		got := ShapleyValues(n, func(m uint32) float64 { return table[m] })
		if !nearSlice(got, split, 1e-9) {
			t.Errorf("trial %d n=%d: Shapley %v, even split %v", trial, n, got, split)
		}
		if trial == 0 {
			if want := []float64{22, 16.5, 11.5}; !nearSlice(got, want, 1e-12) {
				t.Errorf("worked example: %v, want %v", got, want)
			}
		}
	}
}

// More channels than the cap: the cap−1 channels with the most journeys
// stay (ties by name), the rest become one pooled player. The result equals
// Shapley over the relabelled coalitions.
func TestShapleyPooling(t *testing.T) {
	cs := []Coalition{
		{Channels: []string{"a"}, Journeys: 30, Conversions: 3},
		{Channels: []string{"a", "b"}, Journeys: 20, Conversions: 4},
		{Channels: []string{"c"}, Journeys: 40, Conversions: 2},
		{Channels: []string{"b", "d", "e"}, Journeys: 10, Conversions: 5},
		{Channels: []string{"e"}, Journeys: 5, Conversions: 0},
		{Channels: []string{"d"}, Journeys: 10, Conversions: 1},
	}
	// Support: a 50, b 30, c 40, d 20, e 15 → keep a and c, pool b, d, e.
	got, err := Shapley(cs, 3, "other")
	if err != nil {
		t.Fatal(err)
	}
	relabelled := []Coalition{
		{Channels: []string{"a"}, Journeys: 30, Conversions: 3},
		{Channels: []string{"a", "other"}, Journeys: 20, Conversions: 4},
		{Channels: []string{"c"}, Journeys: 40, Conversions: 2},
		{Channels: []string{"other"}, Journeys: 25, Conversions: 6},
	}
	want, err := Shapley(relabelled, 15, "unused")
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(got.Channels, []string{"a", "c", "other"}) || !slices.Equal(got.Channels, want.Channels) {
		t.Fatalf("Channels = %q, want [a c other]", got.Channels)
	}
	if !nearSlice(got.Phi, want.Phi, 1e-12) || !nearSlice(got.Share, want.Share, 1e-12) {
		t.Errorf("pooled Phi %v Share %v, relabelled Phi %v Share %v", got.Phi, got.Share, want.Phi, want.Share)
	}
	if w := []int64{50, 40, 45}; !slices.Equal(got.Journeys, w) {
		t.Errorf("Journeys = %v, want %v", got.Journeys, w)
	}
	// A tie in support is broken by name: b and c both have 40 here.
	cs[2].Journeys = 30
	cs[2].Conversions = 1
	got, err = Shapley(cs, 3, "other")
	if err != nil {
		t.Fatal(err)
	}
	if want := []string{"a", "b", "other"}; !slices.Equal(got.Channels, want) {
		t.Errorf("tie: Channels = %q, want %q", got.Channels, want)
	}
}

// docs/references.md §7 [computed]: coalition counts add across buckets; the
// subset-sum (simplified) Shapley value is additive, the conversion-rate
// Shapley value is not and must be recomputed from the merged counts.
func TestShapleyMergeBuckets(t *testing.T) {
	players := []string{"A", "B", "C"}
	bucket1 := threeChannel
	bucket2 := []Coalition{ // §7 bucket 2: R{A} = 2, R{B,C} = 6; journey counts are ours
		{Channels: []string{"A"}, Journeys: 20, Conversions: 2},
		{Channels: []string{"B", "C"}, Journeys: 40, Conversions: 6},
	}
	merged := append(slices.Clone(bucket1), bucket2...)

	simplified := func(cs []Coalition) []float64 {
		conv, _ := exactSet(cs, players)
		return ShapleyValues(3, subsetSum(conv))
	}
	for _, tt := range []struct {
		name string
		cs   []Coalition
		want []float64
	}{
		{"bucket 1", bucket1, []float64{22, 33.0 / 2, 23.0 / 2}},
		{"bucket 2", bucket2, []float64{2, 3, 3}},
		{"merged", merged, []float64{24, 39.0 / 2, 29.0 / 2}},
	} {
		if got := simplified(tt.cs); !nearSlice(got, tt.want, 1e-12) {
			t.Errorf("simplified Shapley %s = %v, want %v", tt.name, got, tt.want)
		}
	}

	// Conversion-rate Shapley: the listed buckets and their summed counts
	// give one answer...
	summed := slices.Clone(bucket1)
	summed[0].Journeys += 20
	summed[0].Conversions += 2
	summed[5].Journeys += 40
	summed[5].Conversions += 6
	a, errA := Shapley(merged, 15, "other")
	b, errB := Shapley(summed, 15, "other")
	if errA != nil || errB != nil {
		t.Fatal(errA, errB)
	}
	if !nearSlice(a.Phi, b.Phi, 1e-12) {
		t.Errorf("listed buckets %v, summed counts %v", a.Phi, b.Phi)
	}
	// ...which is not the sum of the per-bucket credits.
	r1, _ := Shapley(bucket1, 15, "other")
	r2, _ := Shapley(bucket2, 15, "other")
	perBucket := make([]float64, 3)
	for i := range perBucket {
		perBucket[i] = 50*r1.Share[i] + 8*r2.Share[i]
	}
	mergedCredit := make([]float64, 3)
	for i := range mergedCredit {
		mergedCredit[i] = 58 * a.Share[i]
	}
	if nearSlice(perBucket, mergedCredit, 1e-6) {
		t.Errorf("conversion-rate Shapley looks additive: per bucket %v, merged %v", perBucket, mergedCredit)
	}
}

func TestShapleyErrors(t *testing.T) {
	one := []Coalition{{Channels: []string{"A"}, Journeys: 2, Conversions: 1}}
	many := []Coalition{
		{Channels: []string{"A"}, Journeys: 2, Conversions: 1},
		{Channels: []string{"B"}, Journeys: 2, Conversions: 1},
		{Channels: []string{"other"}, Journeys: 5, Conversions: 1},
	}
	tests := []struct {
		name  string
		cs    []Coalition
		limit int
		other string
		is    error
	}{
		{"no coalitions", nil, 15, "other", ErrNoConversions},
		{"no conversions", []Coalition{{Channels: []string{"A"}, Journeys: 4}}, 15, "other", ErrNoConversions},
		{"only channel-less conversions", []Coalition{{Journeys: 3, Conversions: 3}}, 15, "other", ErrNoConversions},
		{"limit zero", one, 0, "other", nil},
		{"limit above 20", one, 21, "other", nil},
		{"more conversions than journeys", []Coalition{{Channels: []string{"A"}, Journeys: 1, Conversions: 2}}, 15, "other", nil},
		{"negative journeys", []Coalition{{Channels: []string{"A"}, Journeys: -1}}, 15, "other", nil},
		{"unsorted channels", []Coalition{{Channels: []string{"B", "A"}, Journeys: 1, Conversions: 1}}, 15, "other", nil},
		{"repeated channel", []Coalition{{Channels: []string{"A", "A"}, Journeys: 1, Conversions: 1}}, 15, "other", nil},
		{"pooled name taken", many, 2, "other", nil},
		{"pooled name empty", many, 2, "", nil},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			_, err := Shapley(tt.cs, tt.limit, tt.other)
			if err == nil || (tt.is != nil && !errors.Is(err, tt.is)) {
				t.Errorf("error = %v, want %v", err, tt.is)
			}
		})
	}
	// Negative Shapley values are reported as they are: C in the exact-set
	// example of docs/references.md §4 gets −5/6 (see TestShapleyValuesThreeChannel).
	if _, err := Shapley(many, 3, "other"); err != nil {
		t.Errorf("three players within the limit: %v", err)
	}
}

func TestShapleyValuesPanicsOutOfRange(t *testing.T) {
	for _, n := range []int{-1, 21} {
		func() {
			defer func() {
				if recover() == nil {
					t.Errorf("ShapleyValues(%d) did not panic", n)
				}
			}()
			ShapleyValues(n, func(uint32) float64 { return 0 })
		}()
	}
	if got := ShapleyValues(0, func(uint32) float64 { return 0 }); len(got) != 0 {
		t.Errorf("ShapleyValues(0) = %v", got)
	}
}
