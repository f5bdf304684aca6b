package metrics

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"math"
	"slices"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/tally"
)

// StatusSource reports a processor's committed progress. Status must be safe
// to call from any goroutine and cheap (it is called once per scrape);
// *pipeline.Processor implements it.
type StatusSource interface {
	Status() pipeline.Status
}

// QuerierOpener opens a Querier on a snapshot of the committed counters.
// The caller closes it. query.ErrNoData (wrapped or not) means nothing was
// committed yet: the window gauges are then left out without an error.
type QuerierOpener func() (*query.Querier, error)

// ConsumerLagFunc returns the number of stream messages not yet delivered to
// the worker's consumer. It must return when ctx is done.
type ConsumerLagFunc func(ctx context.Context) (uint64, error)

// Namespace prefixes every metric name.
const Namespace = "touchledger"

// OtherChannel is the channel label value credit beyond MaxChannels is
// summed into.
const OtherChannel = "other"

// Defaults of Options.
const (
	DefaultWindow         = 7 * 24 * time.Hour
	DefaultMaxChannels    = 12
	DefaultSessionGap     = 30 * time.Minute    // config session_gap default
	DefaultJourneyTimeout = 30 * 24 * time.Hour // config journey_timeout default
	DefaultInterval       = 5 * time.Minute     // config alert.interval default
	DefaultLagTimeout     = 2 * time.Second
)

// DefaultCommitBuckets are the commit latency histogram's upper bounds in
// seconds: 1 ms doubling up to about 8 s (a commit is one Badger
// transaction, normally milliseconds).
var DefaultCommitBuckets = prometheus.ExponentialBuckets(0.001, 2, 14)

// Options configure Metrics. Zero values take the defaults above.
type Options struct {
	// Status is the processor's committed progress. Required.
	Status StatusSource
	// OpenQuerier opens a snapshot for the window gauges (credit, open
	// sessions and journeys, abandonment, alerts). Nil leaves them out.
	OpenQuerier QuerierOpener
	// ConsumerLag reports the stream backlog; nil leaves the
	// consumer_lag_messages gauge out (replay has no stream).
	ConsumerLag ConsumerLagFunc
	// LagTimeout bounds one ConsumerLag call. Default 2s.
	LagTimeout time.Duration
	// Window is the rolling window of the credit gauges, ending at the
	// latest event time. Default 7d.
	Window time.Duration
	// MaxChannels is the most channel label values per model, "other"
	// included. Default 12.
	MaxChannels int
	// Models are the attribution models exported. Default: every rule-based
	// model, then markov (order 1) and shapley.
	Models []string
	// SessionGap, JourneyTimeout and Interval are the configuration's
	// session_gap, journey_timeout and alert.interval. Defaults 30m, 30d, 5m.
	SessionGap     time.Duration
	JourneyTimeout time.Duration
	Interval       time.Duration
	// CommitBuckets are the commit latency histogram's upper bounds in
	// seconds. Default DefaultCommitBuckets.
	CommitBuckets []float64
	// Now is the wall clock for the watermark delay. Default time.Now.
	Now func() time.Time
	// Build labels the touchledger_build_info gauge (always 1): what binary
	// serves these metrics. Empty fields read "unknown".
	Build BuildInfo
}

// BuildInfo names the running binary (cli.Build reads it from the Go build
// information).
type BuildInfo struct {
	Version   string // module version, "(devel)" for a working tree
	Revision  string // VCS revision
	GoVersion string
}

// withDefaults fills zero values.
func (o Options) withDefaults() Options {
	if o.LagTimeout == 0 {
		o.LagTimeout = DefaultLagTimeout
	}
	if o.Window == 0 {
		o.Window = DefaultWindow
	}
	if o.MaxChannels == 0 {
		o.MaxChannels = DefaultMaxChannels
	}
	if o.Models == nil {
		o.Models = query.Models()
	}
	if o.SessionGap == 0 {
		o.SessionGap = DefaultSessionGap
	}
	if o.JourneyTimeout == 0 {
		o.JourneyTimeout = DefaultJourneyTimeout
	}
	if o.Interval == 0 {
		o.Interval = DefaultInterval
	}
	if o.CommitBuckets == nil {
		o.CommitBuckets = DefaultCommitBuckets
	}
	if o.Now == nil {
		o.Now = time.Now
	}
	return o
}

// Validate checks the options (zero values stand for the defaults).
func (o Options) Validate() error {
	switch {
	case o.Status == nil:
		return errors.New("metrics: a status source is required")
	case o.LagTimeout < 0, o.Window < 0, o.SessionGap < 0, o.JourneyTimeout < 0, o.Interval < 0:
		return errors.New("metrics: durations must not be negative")
	case o.Interval > 0 && o.Interval%time.Second != 0:
		return fmt.Errorf("metrics: interval %s is not a whole number of seconds", o.Interval)
	case o.MaxChannels < 0:
		return fmt.Errorf("metrics: max channels must be positive, got %d", o.MaxChannels)
	}
	seen := map[string]bool{}
	for _, m := range o.Models {
		if err := (query.Request{Kind: query.KindCredit, Model: m}).Validate(); err != nil {
			return fmt.Errorf("metrics: %w", err)
		}
		if seen[m] {
			return fmt.Errorf("metrics: model %q listed twice", m)
		}
		seen[m] = true
	}
	return nil
}

// Metrics is the Prometheus collector of one worker. It is safe for
// concurrent use.
type Metrics struct {
	opts Options

	events, rejects                    *prometheus.Desc
	lag, watermarkDelay, buffered      *prometheus.Desc
	openSessions, openJourneys         *prometheus.Desc
	creditedConversions, creditedValue *prometheus.Desc
	abandonment, alertOpen             *prometheus.Desc
	commitDuration                     prometheus.Histogram

	mu           sync.Mutex // guards the cache; one window computation at a time
	cacheValid   bool
	cacheCommits int
	cache        []prometheus.Metric
}

// New builds the metrics and registers them with reg. Like
// prometheus.MustRegister it panics when the options are invalid (check
// Validate first) or registration fails.
func New(reg prometheus.Registerer, opts Options) *Metrics {
	if err := opts.Validate(); err != nil {
		panic(err)
	}
	opts = opts.withDefaults()
	name := func(n string) string { return prometheus.BuildFQName(Namespace, "", n) }
	m := &Metrics{
		opts: opts,
		events: prometheus.NewDesc(name("events_total"),
			"Input events by outcome, as committed with the state: accepted, duplicate, late, rejected (late excluded).",
			[]string{"outcome"}, nil),
		rejects: prometheus.NewDesc(name("rejects_total"),
			"Input events not accepted, by reason (late included), as committed with the state.",
			[]string{"reason"}, nil),
		lag: prometheus.NewDesc(name("consumer_lag_messages"),
			"Stream messages not yet delivered to the worker's consumer.", nil, nil),
		watermarkDelay: prometheus.NewDesc(name("watermark_delay_seconds"),
			"Wall clock minus the committed event-time watermark.", nil, nil),
		buffered: prometheus.NewDesc(name("buffered_events"),
			"Events waiting in the reorder buffer at the last commit.", nil, nil),
		openSessions: prometheus.NewDesc(name("open_sessions"),
			"Approximate open sessions: sessions whose last action is within the session gap of the latest event time.", nil, nil),
		openJourneys: prometheus.NewDesc(name("open_journeys"),
			"Approximate open journeys: unconverted journeys whose last touch is within the journey timeout of the latest event time.", nil, nil),
		creditedConversions: prometheus.NewDesc(name("credited_conversions"),
			fmt.Sprintf("Conversions credited to the channel by the model over the last %s of event time.", opts.Window),
			[]string{"model", "channel"}, nil),
		creditedValue: prometheus.NewDesc(name("credited_value"),
			fmt.Sprintf("Conversion value (currency units) credited to the channel by the model over the last %s of event time.", opts.Window),
			[]string{"model", "channel"}, nil),
		abandonment: prometheus.NewDesc(name("abandonment_ratio"),
			"Share of sessions that reached the funnel step and not the next one, over the last complete interval.",
			[]string{"step"}, nil),
		alertOpen: prometheus.NewDesc(name("alert_open"),
			"1 while the alert is open, else 0.", []string{"name"}, nil),
		commitDuration: prometheus.NewHistogram(prometheus.HistogramOpts{
			Namespace: Namespace,
			Name:      "commit_duration_seconds",
			Help:      "Time to commit one batch of state, counters and input position to the store.",
			Buckets:   opts.CommitBuckets,
		}),
	}
	b := opts.Build
	for _, f := range []*string{&b.Version, &b.Revision, &b.GoVersion} {
		if *f == "" {
			*f = "unknown"
		}
	}
	reg.MustRegister(m, prometheus.NewGaugeFunc(prometheus.GaugeOpts{
		Namespace:   Namespace,
		Name:        "build_info",
		Help:        "Always 1; the labels name the running binary's module version, VCS revision and Go version.",
		ConstLabels: prometheus.Labels{"version": b.Version, "revision": b.Revision, "goversion": b.GoVersion},
	}, func() float64 { return 1 }))
	return m
}

// ObserveCommit records one commit's duration. Call it once per commit,
// e.g. from pipeline.Config.OnCommit with Processor.Status().CommitTook.
func (m *Metrics) ObserveCommit(d time.Duration) { m.commitDuration.Observe(d.Seconds()) }

// Describe implements prometheus.Collector.
func (m *Metrics) Describe(ch chan<- *prometheus.Desc) {
	for _, d := range []*prometheus.Desc{m.events, m.rejects, m.lag, m.watermarkDelay, m.buffered,
		m.openSessions, m.openJourneys, m.creditedConversions, m.creditedValue, m.abandonment, m.alertOpen} {
		ch <- d
	}
	m.commitDuration.Describe(ch)
}

// Collect implements prometheus.Collector.
func (m *Metrics) Collect(ch chan<- prometheus.Metric) {
	st := m.opts.Status.Status()
	if st.Commits > 0 {
		c := st.Counts
		for _, o := range []struct {
			outcome string
			n       uint64
		}{{"accepted", c.Accepted}, {"duplicate", c.Duplicate}, {"late", c.Late}, {"rejected", c.RejectedTotal()}} {
			ch <- constMetric(m.events, prometheus.CounterValue, float64(o.n), o.outcome)
		}
		for _, r := range rejectReasons(c) {
			n := c.Rejected[r]
			if r == event.ReasonLate {
				n += c.Late
			}
			ch <- constMetric(m.rejects, prometheus.CounterValue, float64(n), string(r))
		}
	}
	ch <- constMetric(m.buffered, prometheus.GaugeValue, float64(st.Buffered))
	if !st.Watermark.IsZero() {
		ch <- constMetric(m.watermarkDelay, prometheus.GaugeValue, m.opts.Now().Sub(st.Watermark).Seconds())
	}
	if m.opts.ConsumerLag != nil {
		ctx, cancel := context.WithTimeout(context.Background(), m.opts.LagTimeout)
		n, err := m.opts.ConsumerLag(ctx)
		cancel()
		if err != nil {
			ch <- prometheus.NewInvalidMetric(m.lag, fmt.Errorf("consumer lag: %w", err))
		} else {
			ch <- constMetric(m.lag, prometheus.GaugeValue, float64(n))
		}
	}
	if m.opts.OpenQuerier != nil {
		for _, x := range m.windowMetrics(st) {
			ch <- x
		}
	}
	m.commitDuration.Collect(ch)
}

// rejectReasons lists every documented reason, then any other reason the
// counts hold (sorted), so the reasons' sum is always complete.
func rejectReasons(c pipeline.Counts) []event.Reason {
	out := slices.Clone(event.Reasons)
	var extra []event.Reason
	for r := range c.Rejected {
		if !slices.Contains(out, r) {
			extra = append(extra, r)
		}
	}
	slices.Sort(extra)
	return append(out, extra...)
}

func constMetric(d *prometheus.Desc, t prometheus.ValueType, v float64, labels ...string) prometheus.Metric {
	x, err := prometheus.NewConstMetric(d, t, v, labels...)
	if err != nil {
		return prometheus.NewInvalidMetric(d, err)
	}
	return x
}

// windowMetrics returns the gauges computed from the counters, recomputed
// only when a commit happened since the last computation that succeeded.
func (m *Metrics) windowMetrics(st pipeline.Status) []prometheus.Metric {
	m.mu.Lock()
	defer m.mu.Unlock()
	if m.cacheValid && m.cacheCommits == st.Commits {
		return m.cache
	}
	out, complete := m.computeWindow(st)
	if complete {
		m.cache, m.cacheCommits, m.cacheValid = out, st.Commits, true
	}
	return out
}

// computeWindow opens a snapshot and builds every window gauge. complete is
// false when some part failed (that part is an invalid metric).
func (m *Metrics) computeWindow(st pipeline.Status) (out []prometheus.Metric, complete bool) {
	q, err := m.opts.OpenQuerier()
	if errors.Is(err, query.ErrNoData) {
		return nil, true
	}
	if err != nil {
		return []prometheus.Metric{prometheus.NewInvalidMetric(m.creditedConversions, fmt.Errorf("open querier: %w", err))}, false
	}
	defer q.Close()
	complete = true
	fail := func(d *prometheus.Desc, err error) {
		out = append(out, prometheus.NewInvalidMetric(d, err))
		complete = false
	}

	for _, model := range m.opts.Models {
		a, err := q.Answer(query.Request{Kind: query.KindCredit, Model: model, Window: query.Span{Last: m.opts.Window}})
		if err != nil {
			fail(m.creditedConversions, fmt.Errorf("credit %s: %w", model, err))
			continue
		}
		for _, c := range CapChannels(a.Credit.Channels, m.opts.MaxChannels) {
			out = append(out,
				constMetric(m.creditedConversions, prometheus.GaugeValue, c.Conversions, model, c.Channel),
				constMetric(m.creditedValue, prometheus.GaugeValue, c.Value, model, c.Channel))
		}
	}

	if f, err := q.Answer(query.Request{Kind: query.KindFunnel, Window: recent(q.Latest(), m.opts.SessionGap, m.opts.Interval)}); err != nil {
		fail(m.openSessions, fmt.Errorf("open sessions: %w", err))
	} else {
		out = append(out, constMetric(m.openSessions, prometheus.GaugeValue, float64(f.Funnel.Sessions)))
	}

	if n, err := openJourneys(q, m.opts.JourneyTimeout); err != nil {
		fail(m.openJourneys, fmt.Errorf("open journeys: %w", err))
	} else {
		out = append(out, constMetric(m.openJourneys, prometheus.GaugeValue, float64(n)))
	}

	from, to := LastCompleteInterval(st.Watermark, q.Latest(), m.opts.Interval)
	if a, err := q.Answer(query.Request{Kind: query.KindFunnel, Window: query.Span{From: from, To: to}}); err != nil {
		fail(m.abandonment, fmt.Errorf("abandonment: %w", err))
	} else {
		f := a.Funnel
		for i, s := range f.Steps {
			if i == len(f.Steps)-1 || s.Abandonment == nil {
				continue
			}
			out = append(out, constMetric(m.abandonment, prometheus.GaugeValue, *s.Abandonment, s.Step))
		}
	}

	if ans, err := q.Answer(query.Request{Kind: query.KindAlerts, Window: recent(q.Latest(), m.opts.Interval, m.opts.Interval)}); err != nil {
		fail(m.alertOpen, fmt.Errorf("alerts: %w", err))
	} else {
		a := ans.Alerts
		open := 0.0
		for _, r := range a.Alerts {
			if r.Open {
				open = 1
			}
		}
		out = append(out, constMetric(m.alertOpen, prometheus.GaugeValue, open, a.Name))
	}
	return out, complete
}

// recent is the window of length d ending just after latest, its edges
// moved out to whole steps (the alert interval, a bucket size) so it is
// covered exactly by fine buckets instead of being rounded to hours.
func recent(latest time.Time, d, step time.Duration) query.Span {
	to := latest.Truncate(step).Add(step)
	from := latest.Add(-d).Truncate(step)
	return query.Span{From: from, To: to}
}

// openJourneys sums the unconverted journeys whose last touch lies within
// timeout of the latest event time (window widened to the path families'
// hour buckets).
func openJourneys(q *query.Querier, timeout time.Duration) (int64, error) {
	p, err := q.PlanFor(tally.JourneyPaths, query.Span{Last: timeout})
	if err != nil {
		return 0, err
	}
	t, err := q.Table(p, tally.JourneyPaths)
	if err != nil {
		return 0, err
	}
	var n int64
	for dims, v := range t {
		if dims != "" {
			n += v[0] - v[1]
		}
	}
	return n, nil
}

// LastCompleteInterval returns the latest interval [from, to) aligned to
// multiples of interval (from the Unix epoch) that ends at or before the
// watermark; a zero watermark falls back to latest.
func LastCompleteInterval(watermark, latest time.Time, interval time.Duration) (from, to time.Time) {
	ref := watermark
	if ref.IsZero() {
		ref = latest
	}
	step := int64(interval / time.Second)
	end := tally.FloorDiv(ref.Unix(), step) * step
	return time.Unix(end-step, 0).UTC(), time.Unix(end, 0).UTC()
}

// ChannelTotal is one channel label value of the credit gauges.
type ChannelTotal struct {
	Channel     string
	Conversions float64
	Value       float64
}

// CapChannels bounds the channel label values to limit: when there are more
// channels, the limit−1 with the largest absolute credited conversions (ties:
// larger absolute value, then name) keep their own label and the rest are
// summed into OtherChannel. A real channel named OtherChannel is folded into
// that sum. The result is sorted by channel name. limit < 1 counts as 1.
func CapChannels(rows []query.ChannelCredit, limit int) []ChannelTotal {
	limit = max(limit, 1)
	out := make([]ChannelTotal, 0, min(len(rows), limit))
	if len(rows) <= limit {
		for _, r := range rows {
			out = append(out, ChannelTotal{r.Channel, r.Conversions, r.Value})
		}
	} else {
		sorted := slices.Clone(rows)
		slices.SortFunc(sorted, func(a, b query.ChannelCredit) int {
			if c := cmp.Compare(math.Abs(b.Conversions), math.Abs(a.Conversions)); c != 0 {
				return c
			}
			if c := cmp.Compare(math.Abs(b.Value), math.Abs(a.Value)); c != 0 {
				return c
			}
			return cmp.Compare(a.Channel, b.Channel)
		})
		other := ChannelTotal{Channel: OtherChannel}
		for _, r := range sorted {
			if len(out) < limit-1 && r.Channel != OtherChannel {
				out = append(out, ChannelTotal{r.Channel, r.Conversions, r.Value})
				continue
			}
			other.Conversions += r.Conversions
			other.Value += r.Value
		}
		out = append(out, other)
	}
	slices.SortFunc(out, func(a, b ChannelTotal) int { return cmp.Compare(a.Channel, b.Channel) })
	return out
}
