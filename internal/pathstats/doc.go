// Package pathstats holds the path and funnel helpers of journey analytics:
// in-order funnel depth and step abandonment, and path keys for the most
// frequent session and journey paths (counted exactly, per time bucket, in
// the store).
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
package pathstats
