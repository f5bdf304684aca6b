package alert

import (
	"errors"
	"fmt"
	"math"
	"time"
)

// ErrParams is returned (wrapped) by Params.Validate and Detect when a
// parameter is out of range.
var ErrParams = errors.New("invalid alert parameters")

// ErrIntervals is returned (wrapped) by Detect when the intervals are not
// ordered by Start or hold impossible counts.
var ErrIntervals = errors.New("invalid intervals")

// Interval is one fixed-length interval of the abandonment series: how many
// sessions ended in it (Sessions) and how many of those abandoned (Abandons).
// Detect expects the intervals ordered by Start and contiguous, with empty
// intervals present as zero counts.
type Interval struct {
	Start    time.Time
	Sessions int64
	Abandons int64
}

// Params configures Detect. DefaultParams gives the documented defaults.
type Params struct {
	// Lambda is the EWMA weight λ of the newest interval, in (0, 1].
	Lambda float64
	// L is the width of the upper limit in standard deviations of the
	// statistic, > 0.
	L float64
	// MinSessions is the least number of sessions an interval needs to be
	// evaluated, >= 1. Smaller intervals carry the statistic unchanged and
	// make no alert decision.
	MinSessions int64
	// Baseline is the length, in intervals, of the rolling window whose
	// pooled abandonment rate is the baseline p0 (2016 = 7 days of 5-minute
	// intervals). Ignored when Target > 0; otherwise >= 1.
	Baseline int
	// Target, when > 0, is a fixed baseline p0 in (0, 1) used instead of the
	// rolling one.
	Target float64
	// CloseAfter is how many consecutive evaluated intervals at or below the
	// upper limit close an open alert, >= 1.
	CloseAfter int
}

// DefaultParams returns the defaults: λ = 0.2 and L = 3 (NIST §6.3.2.4 gives
// λ between 0.2 and 0.3 and L = 3 as the usual choice), MinSessions = 50 (so
// that n·p0 >= 5 at p0 = 0.10, the usual condition for the normal
// approximation to the binomial; common practice), a rolling baseline of
// 2016 intervals (7 days of 5-minute intervals) and CloseAfter = 3 (common
// practice, no source).
func DefaultParams() Params {
	return Params{Lambda: 0.2, L: 3, MinSessions: 50, Baseline: 2016, CloseAfter: 3}
}

// Validate reports the first parameter that is out of range.
func (p Params) Validate() error {
	switch {
	case !(p.Lambda > 0 && p.Lambda <= 1):
		return fmt.Errorf("%w: lambda %v outside (0, 1]", ErrParams, p.Lambda)
	case !(p.L > 0) || math.IsInf(p.L, 1):
		return fmt.Errorf("%w: limit width L %v must be positive and finite", ErrParams, p.L)
	case p.MinSessions < 1:
		return fmt.Errorf("%w: minimum sessions %d must be at least 1", ErrParams, p.MinSessions)
	case !(p.Target >= 0 && p.Target < 1):
		return fmt.Errorf("%w: target %v outside [0, 1)", ErrParams, p.Target)
	case p.Target == 0 && p.Baseline < 1:
		return fmt.Errorf("%w: baseline window %d must be at least 1 interval", ErrParams, p.Baseline)
	case p.CloseAfter < 1:
		return fmt.Errorf("%w: close-after %d must be at least 1 interval", ErrParams, p.CloseAfter)
	}
	return nil
}

// Point is the chart's state after one interval.
type Point struct {
	Start    time.Time
	Sessions int64
	Abandons int64
	// Rate is Abandons/Sessions, 0 when Sessions is 0.
	Rate float64
	// Statistic is the EWMA z_t; Baseline is p0 (after the floor) and UCL
	// the upper limit. For an interval that is not evaluated the three are
	// carried from the last evaluated interval (zero before the first).
	Statistic float64
	Baseline  float64
	UCL       float64
	// Evaluated says the interval had at least MinSessions sessions and a
	// baseline existed.
	Evaluated bool
	// Alerting says the interval was evaluated and Statistic > UCL.
	Alerting bool
}

// Alert is one abandonment spike.
type Alert struct {
	// Opened is the Start of the first alerting interval.
	Opened time.Time
	// Closed is the end of the last alerting interval (the Start of the
	// interval after it); zero while the alert is open.
	Closed time.Time
	// Rate, Baseline and Limit are the interval rate, p0 and UCL of the
	// interval that opened the alert.
	Rate     float64
	Baseline float64
	Limit    float64
	// Peak is the highest rate among the alert's alerting intervals.
	Peak float64
}

// Detect runs the EWMA chart with binomial limits over the intervals and
// returns one Point per interval and the alerts in the order they opened.
// See the package documentation for the exact rules. The same input always
// gives the same output.
func Detect(intervals []Interval, p Params) ([]Point, []Alert, error) {
	if err := p.Validate(); err != nil {
		return nil, nil, err
	}
	for i, iv := range intervals {
		if iv.Sessions < 0 || iv.Abandons < 0 || iv.Abandons > iv.Sessions {
			return nil, nil, fmt.Errorf("%w: interval %d (%s) has %d abandons of %d sessions",
				ErrIntervals, i, iv.Start.Format(time.RFC3339), iv.Abandons, iv.Sessions)
		}
		if i > 0 && !iv.Start.After(intervals[i-1].Start) {
			return nil, nil, fmt.Errorf("%w: interval %d (%s) does not start after interval %d (%s)",
				ErrIntervals, i, iv.Start.Format(time.RFC3339), i-1, intervals[i-1].Start.Format(time.RFC3339))
		}
	}

	lambda := p.Lambda
	decay := (1 - lambda) * (1 - lambda)
	points := make([]Point, len(intervals))
	var alerts []Alert

	var (
		started          bool    // z has been initialised
		z                float64 // EWMA statistic
		weight           float64 // Σ_j λ²(1−λ)^{2(t−j)}/n_j over evaluated j <= t
		carried          Point   // Statistic, Baseline, UCL of the last evaluated point
		poolAbandons     int64   // rolling baseline: sums over the pooled intervals
		poolSessions     int64
		open             = -1 // index of the open alert in alerts, or -1
		quiet            int  // consecutive evaluated quiet intervals while open
		lastAlertingStep int  // index of the open alert's last alerting interval
	)
	pooled := func(j int) bool {
		return intervals[j].Sessions >= p.MinSessions && !points[j].Alerting
	}

	for i, iv := range intervals {
		if p.Target == 0 && i > 0 {
			if pooled(i - 1) {
				poolAbandons += intervals[i-1].Abandons
				poolSessions += intervals[i-1].Sessions
			}
			if j := i - 1 - p.Baseline; j >= 0 && pooled(j) {
				poolAbandons -= intervals[j].Abandons
				poolSessions -= intervals[j].Sessions
			}
		}

		pt := Point{Start: iv.Start, Sessions: iv.Sessions, Abandons: iv.Abandons}
		if iv.Sessions > 0 {
			pt.Rate = float64(iv.Abandons) / float64(iv.Sessions)
		}

		p0, haveBaseline := p.Target, p.Target > 0
		if !haveBaseline && poolSessions > 0 {
			haveBaseline = true
			floor := 0.5 / float64(poolSessions)
			p0 = min(max(float64(poolAbandons)/float64(poolSessions), floor), 1-floor)
		}

		if iv.Sessions < p.MinSessions || !haveBaseline {
			pt.Statistic, pt.Baseline, pt.UCL = carried.Statistic, carried.Baseline, carried.UCL
			points[i] = pt
			continue
		}

		if !started {
			z, started = p0, true
		}
		z = lambda*pt.Rate + (1-lambda)*z
		weight = decay*weight + lambda*lambda/float64(iv.Sessions)
		pt.Statistic = z
		pt.Baseline = p0
		pt.UCL = p0 + p.L*math.Sqrt(p0*(1-p0)*weight)
		pt.Evaluated = true
		pt.Alerting = pt.Statistic > pt.UCL
		points[i] = pt
		carried = pt

		switch {
		case pt.Alerting && open < 0:
			alerts = append(alerts, Alert{
				Opened: iv.Start, Rate: pt.Rate, Baseline: p0, Limit: pt.UCL, Peak: pt.Rate,
			})
			open, quiet, lastAlertingStep = len(alerts)-1, 0, i
		case pt.Alerting:
			alerts[open].Peak = max(alerts[open].Peak, pt.Rate)
			quiet, lastAlertingStep = 0, i
		case open >= 0:
			quiet++
			if quiet >= p.CloseAfter {
				alerts[open].Closed = intervals[lastAlertingStep+1].Start
				open = -1
			}
		}
	}
	return points, alerts, nil
}
