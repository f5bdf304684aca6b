// Package alert detects abandonment spikes: it watches the abandonment rate
// per fixed-length interval with an EWMA control chart whose upper limit
// comes from the binomial variance of each interval, and turns the chart's
// signals into alerts with open and close times.
//
// The package is pure: no clock, files, network, metrics or logging. Time
// arrives as data (Interval.Start).
//
// # Building blocks
//
// EWMA, EWMALimits and EWMALimitsAt are the EWMA chart of Roberts (1959) as
// given in the NIST/SEMATECH e-Handbook of Statistical Methods §6.3.2.4:
//
//	z_t = λ·x_t + (1−λ)·z_{t−1},  z_0 = target
//	limits (asymptotic)  target ± L·s·√(λ/(2−λ))
//	limits (exact, at t) target ± L·s·√(λ/(2−λ)·(1−(1−λ)^{2t}))
//
// PChartLimits is the proportions chart of NIST §6.3.3.2,
// p̄ ± L·√(p̄(1−p̄)/n), clipped to [0, 1]. CUSUM is the tabular CUSUM of NIST
// §6.3.2.3 (Page 1954). Wilson is the Wilson (1927) score interval for a
// proportion.
//
// # Detect
//
// Detect takes the intervals in order, each with the number of sessions that
// ended in it (n_t) and the number of those that abandoned (x_t), rate
// p_t = x_t/n_t, and returns a Point per interval and the alerts.
//
// Baseline p0. With Params.Target > 0, p0 = Target for every interval.
// Otherwise p0 is rolling: the pooled rate Σx_j/Σn_j over the intervals j
// among the Params.Baseline intervals immediately before t (a time window,
// counted in intervals whether or not they were evaluated) that had at least
// MinSessions sessions and were not alerting. Intervals that had enough
// sessions but were not evaluated for want of history do enter the pool.
// While fewer than Baseline intervals precede t, the pool uses what there is;
// an interval with an empty pool is not evaluated. Because alerting intervals
// are left out, a lasting shift keeps the alert open; once the window holds
// only alerting intervals, the next interval with enough sessions is not
// evaluated, joins the pool, and the baseline relearns the new level. A
// pooled rate of 0 or 1 would give a zero variance and
// a limit equal to p0, so p0 is floored into [0.5/N, 1 − 0.5/N], where N is
// the number of pooled sessions (half an abandon of continuity correction;
// common practice, no source). Point.Baseline is p0 after the floor.
//
// Evaluation. An interval is evaluated when n_t >= MinSessions and a
// baseline exists. Let t count evaluated intervals only. At the first one
// z_0 = p0 of that interval. Then
//
//	z_t   = λ·p_t + (1−λ)·z_{t−1}
//	W_t   = (1−λ)²·W_{t−1} + λ²/n_t,  W_0 = 0,
//	        so W_t = Σ_{j<=t} λ²(1−λ)^{2(t−j)}/n_j over evaluated intervals j
//	Var_t = p0·(1−p0)·W_t
//	UCL_t = p0 + L·√Var_t
//
// Var_t is the variance of z_t when every p_j is binomial with mean p0 and
// variance p0(1−p0)/n_j (the p-chart variance of NIST §6.3.3.2). With a
// constant n it equals λ/(2−λ)·(1−(1−λ)^{2t})·p0(1−p0)/n, the exact
// time-varying limit of NIST §6.3.2.4 with s² = p0(1−p0)/n. An interval that
// is not evaluated leaves z and W unchanged (the statistic is carried) and
// makes no alert decision; its Point carries Statistic, Baseline and UCL from
// the last evaluated interval. Only the upper limit is watched: a drop in
// abandonment is good news.
//
// Alerts. An evaluated interval is alerting when z_t > UCL_t. An alert opens
// at the first alerting interval while none is open (Alert.Opened = its
// Start; Rate, Baseline and Limit are that interval's p_t, p0 and UCL_t).
// Later alerting intervals extend it and raise Peak (the highest p_t among
// its alerting intervals). Each evaluated interval with z_t <= UCL_t counts
// one quiet interval; an alerting interval resets the count, and intervals
// that are not evaluated neither count nor reset. When the count reaches
// CloseAfter the alert closes, and Alert.Closed is the end of its last
// alerting interval, taken as the Start of the interval after it (intervals
// are contiguous). So [Opened, Closed) covers exactly the alert's alerting
// intervals and any quiet or skipped intervals between them; the close is
// decided CloseAfter evaluated intervals later. An alert still open after the
// last interval has a zero Closed.
//
// Invariants: len(points) == len(intervals); every alert has Peak >= Rate
// and Limit > Baseline; alerts do not overlap and are ordered by Opened; the
// result depends only on the input (no clock, no randomness, no map order).
//
// Sources: Roberts, S. W. (1959), "Control chart tests based on geometric
// moving averages", Technometrics 1(3):239–250 (volume and pages from
// memory); NIST/SEMATECH e-Handbook §6.3.2.3, §6.3.2.4 and §6.3.3.2,
// https://www.itl.nist.gov/div898/handbook/pmc/section3/; Page, E. S.
// (1954), "Continuous inspection schemes", Biometrika 41:100–115 (from
// memory); Wilson, E. B. (1927), JASA 22:209–212.
package alert
