// Package credit computes how much of each conversion a marketing channel
// earns, under rule-based and data-driven attribution models. It is pure:
// no clock, files, network, metrics or logging; times come in as data.
//
// # Rule-based models (per conversion)
//
// Weights takes a converting journey's eligible touches in time order and the
// conversion time and returns one weight per touch (a channel touched three
// times gets three weights). Invariant: every weight is >= 0 and they sum to 1.
// With n touches and Δt_i = conversion time − time of touch i:
//
//	first-touch      w_1 = 1
//	last-touch       w_n = 1
//	last-marketing  1 on the last touch whose channel is not Params.Direct;
//	                 if every touch is direct, the last one
//	linear           w_i = 1/n
//	time-decay       w_i ∝ 2^(−Δt_i / h), h = Params.HalfLife
//	position-based   n = 1: 1; n = 2: ½, ½; n >= 3: First to the first,
//	                 Last to the last, Middle/(n−2) to each middle touch
//	                 (normalised by First+Middle+Last)
//
// These rules are industry practice (named in Du et al. 2019; Kelly, Vaver &
// Koehler); the 40/20/40 split, the 1- and 2-touch rules and the 7-day
// half-life are common practice with no published source (see
// docs/references.md §2).
//
// Apportion turns weights into integer units (cents, micro-units) by the
// largest-remainder method: floor(total·w_i/Σw) each, the leftover units one
// each to the largest fractional remainders, ties to the lower index
// (common practice). Invariant: the parts sum exactly to the total. Both
// functions write into a caller-supplied slice and do not allocate on the
// hot path.
//
// # Markov-chain removal effect (over a window's transition counts)
//
// A journey is the path @entry → s_1 → … → s_m → @converted (or @lost). At
// order k a state is the tuple of the last <= k channels (the first k−1
// states are the shorter prefixes); PathTransitions produces these steps and
// StateOf / StateChannels encode a tuple as its channel names joined by the
// byte 0x1f (reserved states start with 0x00, so channel names must not
// contain 0x1f nor start with 0x00). Transition counts c(a,b) add across time
// buckets and partitions; Markov turns them into p(a,b) = c(a,b)/Σ_b' c(a,b')
// and, with @converted and @lost absorbing, solves
//
//	x_s = p(s, @converted) + Σ_t p(s,t)·x_t,  i.e. (I − Q) x = r,
//
// for the probability of conversion from each transient state (fundamental
// matrix N = (I − Q)^−1, B = N·R; Kemeny & Snell 1960; Grinstead & Snell
// ch. 11). P = x_START. Removing channel c sends every transition into a
// state whose tuple contains c to @lost, giving P_−c; the removal effect is
// RE(c) = 1 − P_−c/P and a channel's share is RE(c)/Σ RE (Anderl, Becker, von
// Wangenheim & Schumann 2016, IJRM 33(3); the "set P(Exit|N) = 1" reading of
// stats.stackexchange.com/q/336227). Invariants: RE in [0, 1], shares sum to
// 1. P = 0 gives ErrNoConversionPath and Σ RE = 0 gives ErrNoRemovalEffect,
// never NaN. At order 1 collapsing consecutive repeats changes nothing; at
// higher orders it does (docs/references.md §3). For counts taken from complete
// journeys P equals the observed conversion rate, because the observed visit
// counts solve the chain's forward equations.
//
// Removal effects are not additive across buckets: sum the counts, then call
// Markov once (docs/references.md §7).
//
// Solving. Only states reachable from @entry that can reach @converted take
// part (every other state converts with probability 0, removal or not).
// Chains of up to 160 such states (order 1 up to 159 channels) are solved
// with gonum's dense LU decomposition, one system per removal. Larger chains (an order-3
// chain over 20 channels has ~7000 states, where one dense LU would take
// minutes) use Gauss–Seidel sweeps over the sparse rows: the full chain
// first, then the removal systems side by side, started from the full
// solution and spread over up to GOMAXPROCS goroutines; Aitken extrapolation
// removes the slowest error mode once its rate holds steady. The stopping
// rule bounds the estimated error of P_−c at 1e-10·P; measured errors are
// about 1e-12, and removal effects below 1e-9 are reported as 0. Tests check
// both solvers against each other and against repeated squaring of the full
// transition matrix.
//
// # Shapley value (over a window's channel-set counts)
//
// For n players, ShapleyValues computes
//
//	φ_i = Σ_{S ⊆ N∖{i}} |S|!(n−|S|−1)!/n! · [v(S∪{i}) − v(S)]   (Shapley 1953)
//
// exactly in O(n·2^n), n <= 20; Σ φ_i = v(N) when v(∅) = 0.
//
// Shapley attributes with the conversion-rate value function
//
//	v(S) = conversions / journeys over the journeys whose channel set ⊆ S
//
// (0 where there are none), so v(N) is the overall conversion rate; this is
// the conversion-rate reading of Dalessandro, Perlich, Stitelman & Provost
// (2012) applied to the population confined to S (docs/references.md §4). Inputs
// are Coalition counts (journeys and conversions per exact channel set),
// which add across buckets; the subset sums come from a zeta transform. More
// channels than the limit are pooled: the limit−1 channels with the most
// journeys stay players (ties by name) and the rest become one player.
// Shares are φ normalised to sum 1. Negative values can occur (a channel
// whose journeys convert worse than those without it) and are reported as
// they are, not clipped. Each player's journey count is returned as its
// support. With the subset-sum value function v(S) = Σ_{T ⊆ S} R_T the
// Shapley value equals splitting each coalition's conversions evenly over
// its channels (Zhao, Mahboobi & Bagheri 2018); tests use this identity.
// Like removal effects, conversion-rate Shapley credit is recomputed from
// merged counts, never summed per bucket (docs/references.md §7).
//
// Citations marked "from memory" in docs/references.md (Anderl et al., Kemeny &
// Snell, Shapley's volume details, Dalessandro et al.'s venue) should be
// checked against the publisher before they are quoted elsewhere.
package credit
