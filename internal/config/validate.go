package config

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/touchledger/touchledger/internal/event"
)

// FieldError is one invalid setting, named by its dotted key.
type FieldError struct {
	Key     string // e.g. "alert.lambda", "store.resolutions[1].step"
	Problem string // lowercase, e.g. "must be between 0 (exclusive) and 1, got 1.5"
}

func (e *FieldError) Error() string { return e.Key + ": " + e.Problem }

// Validate checks every setting and returns nil, or all problems found as
// *FieldError values joined with errors.Join, in key order.
func (c Config) Validate() error {
	var v validation

	if c.Currency != "" && !isCurrencyCode(c.Currency) {
		v.add("currency", "must be empty or an upper-case ISO 4217 code of three letters, got %q", c.Currency)
	}
	v.positive("session_gap", c.SessionGap)
	if c.Lateness < 0 {
		v.add("lateness", "must not be negative, got %s", c.Lateness)
	}
	v.names("goal_actions", c.GoalActions, c.Limits.MaxName)
	v.names("funnel_steps", c.FunnelSteps, c.Limits.MaxName)
	v.name("basket_step", c.BasketStep, c.Limits.MaxName)
	v.positive("click_lookback", c.ClickLookback)
	v.positive("view_lookback", c.ViewLookback)
	if c.ViewLookback > c.ClickLookback {
		v.add("view_lookback", "must not exceed click_lookback (%s), got %s", c.ClickLookback, c.ViewLookback)
	}
	v.positive("journey_timeout", c.JourneyTimeout)
	v.name("direct_channel", c.DirectChannel, c.Limits.MaxName)
	v.positive("half_life", c.HalfLife)

	w := c.PositionWeights
	for _, p := range []struct {
		key    string
		weight float64
	}{{"position_weights.first", w.First}, {"position_weights.middle", w.Middle}, {"position_weights.last", w.Last}} {
		if !(p.weight >= 0) || math.IsInf(p.weight, 0) {
			v.add(p.key, "must be a finite number ≥ 0, got %s", number(p.weight))
		}
	}
	if sum := w.First + w.Middle + w.Last; !(math.Abs(sum-1) <= 1e-9) {
		v.add("position_weights", "must sum to 1 (within 1e-9), got %s", number(sum))
	}

	v.positive("dedup_horizon", c.DedupHorizon)
	v.between("markov_max_order", c.MarkovMaxOrder, 1, 4)
	v.between("shapley_cap", c.ShapleyCap, 1, 20)
	v.atLeast("path_max_len", c.PathMaxLen, 2)

	a := c.Alert
	v.positive("alert.interval", a.Interval)
	if !(a.Lambda > 0 && a.Lambda <= 1) {
		v.add("alert.lambda", "must be between 0 (exclusive) and 1, got %s", number(a.Lambda))
	}
	if !(a.Limit > 0) || math.IsInf(a.Limit, 0) {
		v.add("alert.limit", "must be a finite number > 0, got %s", number(a.Limit))
	}
	v.atLeast("alert.min_sessions", a.MinSessions, 1)
	v.positive("alert.baseline", a.Baseline)
	if a.Interval > 0 && a.Baseline > 0 && a.Baseline < a.Interval {
		v.add("alert.baseline", "must be at least alert.interval (%s), got %s", a.Interval, a.Baseline)
	}
	v.atLeast("alert.close_after", a.CloseAfter, 1)
	if i := slices.Index(c.FunnelSteps, a.Step); i < 0 || i == len(c.FunnelSteps)-1 {
		v.add("alert.step", "must be a funnel step other than the last, got %q", a.Step)
	}
	if !(a.Target >= 0 && a.Target < 1) {
		v.add("alert.target", "must be 0 (rolling baseline) or a rate between 0 and 1, got %s", number(a.Target))
	}

	v.atLeast("privacy.key_version", c.Privacy.KeyVersion, 1)
	v.atLeast("rejects.max_mib", c.Rejects.MaxMiB, 0)
	v.atLeast("rejects.keep", c.Rejects.Keep, 1)
	if c.Clock.MaxFuture < 0 {
		v.add("clock.max_future", "must not be negative, got %s", c.Clock.MaxFuture)
	}
	if c.Clock.MaxJump < 0 {
		v.add("clock.max_jump", "must not be negative, got %s", c.Clock.MaxJump)
	}

	s := c.Store
	v.resolutions(s.Resolutions)
	if len(s.Resolutions) > 0 && s.Resolutions[0].Step > 0 && a.Interval > 0 && a.Interval%s.Resolutions[0].Step != 0 {
		v.add("alert.interval", "must be a multiple of the finest store step (%s), got %s", s.Resolutions[0].Step, a.Interval)
	}
	v.atLeast("store.cache_users", s.CacheUsers, 1)
	v.atLeast("store.min_free_mib", s.MinFreeMiB, 0)
	if !(s.MinFreePercent >= 0 && s.MinFreePercent < 100) {
		v.add("store.min_free_percent", "must be from 0 to below 100, got %s", number(s.MinFreePercent))
	}
	v.atLeast("store.memtable_mib", s.MemtableMiB, 8)
	v.atLeast("store.block_cache_mib", s.BlockCacheMiB, 1)
	v.atLeast("store.index_cache_mib", s.IndexCacheMiB, 1)
	v.atLeast("store.commit_events", s.CommitEvents, 1)
	v.positive("store.commit_interval", s.CommitInterval)

	l := c.Limits
	v.atLeast("limits.max_payload", l.MaxPayload, 256)
	v.atLeast("limits.max_id", l.MaxID, 1)
	v.atLeast("limits.max_user", l.MaxUser, 1)
	v.atLeast("limits.max_name", l.MaxName, 1)

	return errors.Join(v.problems...)
}

// validation collects problems.
type validation struct {
	problems []error
}

func (v *validation) add(key, format string, args ...any) {
	v.problems = append(v.problems, &FieldError{Key: key, Problem: fmt.Sprintf(format, args...)})
}

func (v *validation) positive(key string, d Duration) {
	if d <= 0 {
		v.add(key, "must be positive, got %s", d)
	}
}

func (v *validation) atLeast(key string, n, low int) {
	if n < low {
		v.add(key, "must be at least %d, got %d", low, n)
	}
}

func (v *validation) between(key string, n, low, high int) {
	if n < low || n > high {
		v.add(key, "must be %d to %d, got %d", low, high, n)
	}
}

// name checks an action or channel name: non-empty, within the event name
// limit (or no event could carry it), free of control characters, not
// beginning with the reserved "@" (the decoder rejects such events).
func (v *validation) name(key, s string, limit int) {
	switch {
	case s == "":
		v.add(key, "must not be empty")
	case len(s) > limit:
		v.add(key, "is %d bytes, longer than limits.max_name (%d)", len(s), limit)
	case hasControl(s):
		v.add(key, "must not hold control characters, got %q", s)
	case event.IsReserved(s):
		v.add(key, "must not begin with %q (reserved for the states touchledger adds, such as %s), got %q", event.ReservedPrefix, event.StateConverted, s)
	}
}

func (v *validation) names(key string, list []string, limit int) {
	if len(list) == 0 {
		v.add(key, "must list at least one name")
		return
	}
	for i, s := range list {
		v.name(fmt.Sprintf("%s[%d]", key, i), s, limit)
		if slices.Contains(list[:i], s) {
			v.add(fmt.Sprintf("%s[%d]", key, i), "repeats %q", s)
		}
	}
}

// resolutions checks the store's bucket sizes: present, named uniquely,
// whole seconds, finest first with each step dividing the next (so a coarse
// bucket is an exact sum of fine ones), retention 0 or at least one step.
func (v *validation) resolutions(rs []Resolution) {
	if len(rs) == 0 {
		v.add("store.resolutions", "must list at least one resolution")
		return
	}
	for i, r := range rs {
		key := fmt.Sprintf("store.resolutions[%d]", i)
		if r.Name == "" {
			v.add(key+".name", "must not be empty")
		} else if slices.ContainsFunc(rs[:i], func(p Resolution) bool { return p.Name == r.Name }) {
			v.add(key+".name", "repeats %q", r.Name)
		}
		if r.Step <= 0 || time.Duration(r.Step)%time.Second != 0 {
			v.add(key+".step", "must be a positive whole number of seconds, got %s", r.Step)
			continue
		}
		switch {
		case r.Retention < 0:
			v.add(key+".retention", "must not be negative, got %s", r.Retention)
		case r.Retention > 0 && r.Retention < r.Step:
			v.add(key+".retention", "must be 0 (keep forever) or at least the step %s, got %s", r.Step, r.Retention)
		}
		if i == 0 {
			continue
		}
		prev := rs[i-1]
		if prev.Step <= 0 {
			continue
		}
		if r.Step <= prev.Step || r.Step%prev.Step != 0 {
			v.add(key+".step", "must be a larger multiple of the previous step %s, got %s", prev.Step, r.Step)
		}
	}
}

// number formats f for a message, lowercase ("nan", "+inf").
func number(f float64) string {
	return strings.ToLower(strconv.FormatFloat(f, 'g', -1, 64))
}

func isCurrencyCode(s string) bool {
	if len(s) != 3 {
		return false
	}
	for i := range 3 {
		if s[i] < 'A' || s[i] > 'Z' {
			return false
		}
	}
	return true
}

func hasControl(s string) bool {
	for i := range len(s) {
		if s[i] < 0x20 || s[i] == 0x7f {
			return true
		}
	}
	return false
}
