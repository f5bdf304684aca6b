// Package pathstats holds the path and funnel helpers of journey analytics:
// in-order funnel depth and step abandonment, path keys for the most frequent
// session and journey paths, and a bounded, mergeable heavy-hitter summary
// (TopK) that counts those paths in memory that does not grow with the
// number of distinct paths.
//
// The package is pure: no clock, files, network, metrics or logging.
//
// # Funnel
//
// FunnelDepth(actions, steps) is the number of the configured steps a
// session reached in order (an in-order funnel): step i counts only if steps
// 0..i−1 were reached at earlier actions of the session; other actions in
// between are ignored. AddDepth turns depths into per-step counts
// n_1 >= n_2 >= ... >= n_k (a session of depth d adds one to n_1..n_d).
// Step abandonment is a_i = 1 − n_{i+1}/n_i, basket abandonment is
// 1 − converted/basket sessions (Abandonment; definitions are common practice, no
// source). Example: 1000 → 300 → 150 → 120 → 90 gives 7/10, 1/2, 1/5, 1/4.
//
// # Paths
//
// CollapseRepeats drops consecutive duplicates (A A B A → A B A). PathKey
// collapses a path and joins it with " → "; a collapsed path longer than
// maxLen keeps its first maxLen−1 elements, then "…", then its last element.
//
// # TopK: Space-Saving (Metwally, Agrawal & El Abbadi 2005)
//
// A TopK of capacity m keeps at most m counters (key, count c, error ε) and
// the total weight N. Observe(x, n), n >= 1: a listed x gets c += n; else,
// while a counter is free, x gets c = n, ε = 0; else the counter with the
// smallest count min is reassigned to x with c = min + n, ε = min. The paper
// adds 1 per arrival; adding a weight n is the same step repeated n times
// with the item kept, so the proofs carry over. Eviction tie-break: the
// smallest count, then the lexicographically largest key; Items sort by
// count descending, then key ascending. Together these make every result a
// function of the input sequence alone.
//
// Let U = UnlistedMax(): the smallest count when all m counters are used,
// else 0. Invariants (proofs in the paper for Observe, below for Merge):
//
//	(I1) c − ε <= f <= c for every listed item, f its true count;
//	(I2) f <= U for every item not listed; so every item with f > U is listed;
//	(I3) ε <= U for every listed item, and U <= every listed count;
//	(I4) Σc <= N, with Σc = N for a summary built by Observe alone;
//	     hence U <= N/m when full, and every error is at most N/m.
//
// Guaranteed(k) returns the first k items whose lower bound c − ε is at
// least the (k+1)-th largest count; by (I1) and (I2) nothing else can beat
// them, so they are certainly in the true top k (Metwally et al. 2005).
//
// # Merge
//
// Agarwal, Cormode, Huang, Phillips, Wei & Yi ("Mergeable summaries", PODS
// 2012) show that Space-Saving and Misra–Gries summaries merge. Their rule is
// stated for Misra–Gries counters, which are lower bounds: add the counters,
// subtract the (m+1)-th largest merged count from all, drop those <= 0; the
// error of every item grows by that (m+1)-th count. TopK keeps Space-Saving's
// upper-bound counts instead, so it merges in the Space-Saving form (the same
// rule appears, from memory, in Cafaro, Pulimeno & Tempesta 2016, "A parallel
// space saving algorithm for frequent items"): for summaries A and B with
// unlisted bounds U_A, U_B, every key x of either gets
//
//	Ĉ(x) = c_A(x) + c_B(x),  Ê(x) = ε_A(x) + ε_B(x),
//
// where a key missing from a summary counts c = ε = that summary's U; the
// result keeps the m = min(m_A, m_B) largest Ĉ (ties to the smaller key) and
// N = N_A + N_B. So the error of a kept item grows by the other summary's
// error, or by the other summary's U where the item is missing there.
// Derivation of the invariants:
//
//   - (I1): f = f_A + f_B <= Ĉ by (I1)/(I2) of each side; Ĉ − Ê is the sum
//     of the sides' lower bounds (0 for a missing side), so Ĉ − Ê <= f.
//   - (I3) and (I2): every listed count of A is >= U_A, so every Ĉ >= U_A +
//     U_B >= Ê. An item listed in neither has f <= U_A + U_B; a dropped key
//     has f <= Ĉ <= the smallest kept count. If keys were dropped or the
//     result is full, both bounds are <= the new smallest count = the new U;
//     if it is not full, no input was full, U_A = U_B = 0 and nothing else
//     was seen.
//   - (I4): the kept set K has |K| <= m <= m_A. Its A-part is Σ over the keys
//     of K listed in A plus U_A for each key of K missing from A. Either
//     U_A = 0, or A is full and its m_A − |K∩A| >= |K \ A| counters outside
//     K are each >= U_A; either way the A-part is at most Σc_A <= N_A. The
//     same holds for B, so Σ_K Ĉ <= N_A + N_B = N (with equality when no key
//     is dropped and both sides have Σc = N).
//
// A merge therefore keeps every guarantee of a summary built by Observe,
// except that Σc = N may become Σc <= N; Observe may continue on the result.
// Merge is commutative; like any truncating summary it is not associative in
// general. Merging summaries of different capacities gives the smaller one.
//
// # Encoding
//
// MarshalBinary writes version 1: version byte, uvarint capacity, uvarint N,
// uvarint k, then k counters in Items order, each uvarint key length, key
// bytes, uvarint count step (the first count, then the previous count minus
// this one), uvarint error. UnmarshalBinary checks (I1)–(I4) as far as the
// bytes allow and rejects anything else with ErrCorrupt.
package pathstats
