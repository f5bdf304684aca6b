package credit

import (
	"cmp"
	"errors"
	"fmt"
	"math/bits"
	"slices"
)

// MaxShapleyPlayers is the largest number of players ShapleyValues and
// Shapley accept: the value table has 2^n entries (8 MiB of float64 at 20).
const MaxShapleyPlayers = 20

// ShapleyValues returns the exact Shapley values of the n players (0 <= n <=
// 20) of the game v over bitmasks (bit i = player i):
//
//	φ_i = Σ_{S ⊆ N∖{i}} |S|!(n−|S|−1)!/n! · [v(S∪{i}) − v(S)]   (Shapley 1953)
//
// v(0) must be 0; then Σ φ_i = v(N) (efficiency). v is called once per
// coalition, 2^n times; the sum costs O(n·2^n). n outside [0, 20] panics.
func ShapleyValues(n int, v func(mask uint32) float64) []float64 {
	if n < 0 || n > MaxShapleyPlayers {
		panic(fmt.Sprintf("credit: ShapleyValues with %d players, want 0..%d", n, MaxShapleyPlayers))
	}
	table := make([]float64, 1<<n)
	for m := range table {
		table[m] = v(uint32(m))
	}
	return shapleyFromTable(n, table)
}

// shapleyFromTable computes Shapley values from v given for every mask. It
// streams the table once, using the equivalent form
//
//	φ_i = Σ_{S∋i} w(|S|−1)·v(S) − Σ_{S∌i} w(|S|)·v(S),  w(s) = s!(n−s−1)!/n!
//
// and, to touch only the set bits of each mask, adds w(|S|−1)+w(|S|) for
// members and subtracts Σ_S w(|S|)·v(S) from everyone once at the end.
func shapleyFromTable(n int, v []float64) []float64 {
	phi := make([]float64, n)
	if n == 0 {
		return phi
	}
	// weight[s] = s!(n−s−1)!/n! = 1/(n·C(n−1, s)) for s < n, 0 for s = n;
	// C(19, s) <= 92378 is exact in float64.
	weight := make([]float64, n+1)
	binom := 1.0
	for s := range n {
		weight[s] = 1 / (float64(n) * binom)
		binom = binom * float64(n-1-s) / float64(s+1)
	}
	member := make([]float64, n+1) // w(s−1) + w(s) for |S| = s
	for s := 1; s <= n; s++ {
		member[s] = weight[s-1] + weight[s]
	}
	var outside float64
	for m, val := range v {
		if val == 0 {
			continue
		}
		c := bits.OnesCount(uint(m))
		outside += weight[c] * val
		add := member[c] * val
		for b := uint(m); b != 0; b &= b - 1 {
			phi[bits.TrailingZeros(b)] += add
		}
	}
	for i := range phi {
		phi[i] -= outside
	}
	return phi
}

// Coalition is the aggregate of the journeys that touched exactly one set of
// channels: how many there were, how many converted and the conversions'
// value (in the caller's units). Counts of several time buckets or
// partitions add. Shapley only validates Value (>= 0); the caller applies
// the shares to the window's value.
type Coalition struct {
	Channels              []string // sorted, distinct
	Journeys, Conversions int64
	Value                 int64
}

// ShapleyResult is the answer of Shapley.
type ShapleyResult struct {
	Channels []string  // players, sorted; includes the pooled player if pooling happened
	Phi      []float64 // raw Shapley values; they sum to v(N), the overall conversion rate
	Share    []float64 // Phi normalised to sum 1; negative values are kept as they are
	Journeys []int64   // journeys that touched each player (its support)
}

// ErrNoConversions is returned by Shapley when the coalitions hold no
// conversion: there is nothing to share.
var ErrNoConversions = errors.New("shapley: no conversions")

// Shapley computes Shapley credit with the conversion-rate value function
// v(S) = conversions / journeys over the journeys whose channel set lies
// inside S (0 where there are none), so v(N) is the overall conversion rate.
// Players are the channels seen; if there are more than limit (1..20), the
// limit−1 channels with the most journeys (ties by name) stay players and the
// rest are pooled into one player named other. Coalitions with no journeys
// and no conversions are skipped; coalitions with no channels have no player
// to credit and are left out (the caller credits them to the direct channel).
// The subset sums come from a zeta transform over the 2^n masks, O(n·2^n).
func Shapley(coalitions []Coalition, limit int, other string) (ShapleyResult, error) {
	if limit < 1 || limit > MaxShapleyPlayers {
		return ShapleyResult{}, fmt.Errorf("shapley: player limit %d out of range 1..%d", limit, MaxShapleyPlayers)
	}
	support := map[string]int64{}
	var conversions int64
	for _, c := range coalitions {
		if c.Journeys < 0 || c.Conversions < 0 || c.Value < 0 {
			return ShapleyResult{}, fmt.Errorf("shapley: coalition %q has a negative count", c.Channels)
		}
		if c.Conversions > c.Journeys {
			return ShapleyResult{}, fmt.Errorf("shapley: coalition %q has %d conversions but %d journeys", c.Channels, c.Conversions, c.Journeys)
		}
		for i := 1; i < len(c.Channels); i++ {
			if c.Channels[i-1] >= c.Channels[i] {
				return ShapleyResult{}, fmt.Errorf("shapley: coalition %q: channels not sorted and distinct", c.Channels)
			}
		}
		if c.Journeys == 0 || len(c.Channels) == 0 {
			continue
		}
		conversions += c.Conversions
		for _, ch := range c.Channels {
			support[ch] += c.Journeys
		}
	}
	if conversions == 0 {
		return ShapleyResult{}, ErrNoConversions
	}

	seen := make([]string, 0, len(support))
	for ch := range support {
		seen = append(seen, ch)
	}
	// player maps a channel to its bit; pooled channels share other's bit.
	player := make(map[string]int, len(seen))
	var players []string
	if len(seen) <= limit {
		players = seen
	} else {
		if other == "" {
			return ShapleyResult{}, errors.New("shapley: more channels than the player limit and no name for the pooled player")
		}
		slices.SortFunc(seen, func(a, b string) int {
			if c := cmp.Compare(support[b], support[a]); c != 0 {
				return c
			}
			return cmp.Compare(a, b)
		})
		players = append(slices.Clone(seen[:limit-1]), other)
		if slices.Contains(seen[:limit-1], other) {
			return ShapleyResult{}, fmt.Errorf("shapley: pooled player name %q is also a channel", other)
		}
	}
	slices.Sort(players)
	for i, p := range players {
		player[p] = i
	}
	if len(players) < len(seen) {
		otherBit := player[other]
		for _, ch := range seen {
			if _, ok := player[ch]; !ok {
				player[ch] = otherBit
			}
		}
	}

	n := len(players)
	journeys := make([]int64, 1<<n)
	convs := make([]int64, 1<<n)
	res := ShapleyResult{Channels: players, Journeys: make([]int64, n)}
	for _, c := range coalitions {
		if c.Journeys == 0 || len(c.Channels) == 0 {
			continue
		}
		var mask int
		for _, ch := range c.Channels {
			mask |= 1 << player[ch]
		}
		journeys[mask] += c.Journeys
		convs[mask] += c.Conversions
		for m := mask; m != 0; m &= m - 1 {
			res.Journeys[bits.TrailingZeros(uint(m))] += c.Journeys
		}
	}
	// Zeta transform: after it, journeys[S] = Σ_{T ⊆ S} journeys[T].
	for i := range n {
		bit := 1 << i
		for m := range journeys {
			if m&bit != 0 {
				journeys[m] += journeys[m^bit]
				convs[m] += convs[m^bit]
			}
		}
	}
	v := make([]float64, 1<<n)
	for m := 1; m < len(v); m++ {
		if journeys[m] > 0 {
			v[m] = float64(convs[m]) / float64(journeys[m])
		}
	}
	res.Phi = shapleyFromTable(n, v)
	var sum float64
	for _, p := range res.Phi {
		sum += p
	}
	res.Share = make([]float64, n)
	for i, p := range res.Phi {
		res.Share[i] = p / sum
	}
	return res, nil
}
