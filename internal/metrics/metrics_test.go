package metrics_test

import (
	"context"
	"errors"
	"maps"
	"math"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	dto "github.com/prometheus/client_model/go"

	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/metrics"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/query"
)

const day = 24 * time.Hour

// gathered indexes a Gather result: family name → label set → metric.
type gathered map[string]map[string]*dto.Metric

func gather(t *testing.T, g prometheus.Gatherer) gathered {
	t.Helper()
	fams, err := g.Gather()
	if err != nil {
		t.Fatalf("gather: %v", err)
	}
	return index(fams)
}

func index(fams []*dto.MetricFamily) gathered {
	out := gathered{}
	for _, f := range fams {
		out[f.GetName()] = map[string]*dto.Metric{}
		for _, m := range f.GetMetric() {
			out[f.GetName()][labelKey(m)] = m
		}
	}
	return out
}

func labelKey(m *dto.Metric) string {
	var parts []string
	for _, l := range m.GetLabel() {
		parts = append(parts, l.GetName()+"="+l.GetValue())
	}
	return strings.Join(parts, ",")
}

// value returns the counter or gauge value of name{labels}.
func (g gathered) value(t *testing.T, name, labels string) float64 {
	t.Helper()
	m, ok := g[name][labels]
	if !ok {
		t.Fatalf("%s{%s} not exported (have %v)", name, labels, keys(g[name]))
	}
	if m.Counter != nil {
		return m.Counter.GetValue()
	}
	return m.Gauge.GetValue()
}

func keys[V any](m map[string]V) []string {
	var out []string
	for k := range m {
		out = append(out, k)
	}
	return out
}

func TestCountersEqualCommittedCounts(t *testing.T) {
	f := openFixture(t)
	reg := prometheus.NewPedanticRegistry()
	m := metrics.New(reg, metrics.Options{Status: f.proc, OpenQuerier: f.open})
	f.onCommit = m.ObserveCommit
	cp := f.replay(t)
	want := f.wantCounts()
	// The fixture's input was built with these outcomes; the replay must agree
	// before the metrics are compared with it.
	if cp.Counts.Accepted != want.Accepted || cp.Counts.Duplicate != want.Duplicate || cp.Counts.Late != want.Late ||
		!maps.Equal(cp.Counts.Rejected, want.Rejected) {
		t.Fatalf("replay counts %+v, input built for %+v", cp.Counts, want)
	}
	g := gather(t, reg)
	cases := []struct {
		name, labels string
		want         uint64
	}{
		{"touchledger_events_total", "outcome=accepted", want.Accepted},
		{"touchledger_events_total", "outcome=duplicate", want.Duplicate},
		{"touchledger_events_total", "outcome=late", want.Late},
		{"touchledger_events_total", "outcome=rejected", want.RejectedTotal()},
	}
	for _, r := range event.Reasons {
		n := want.Rejected[r]
		if r == event.ReasonLate {
			n = want.Late
		}
		cases = append(cases, struct {
			name, labels string
			want         uint64
		}{"touchledger_rejects_total", "reason=" + string(r), n})
	}
	for _, c := range cases {
		if got := g.value(t, c.name, c.labels); got != float64(c.want) {
			t.Errorf("%s{%s} = %v, want %d", c.name, c.labels, got, c.want)
		}
	}
	if n := len(g["touchledger_rejects_total"]); n != len(event.Reasons) {
		t.Errorf("rejects_total has %d reasons, want %d", n, len(event.Reasons))
	}
	st := f.proc.Status()
	if st.Commits < 2 {
		t.Fatalf("fixture made %d commits, want several", st.Commits)
	}
	h := g["touchledger_commit_duration_seconds"][""].GetHistogram()
	if got := h.GetSampleCount(); got != uint64(st.Commits) {
		t.Errorf("commit_duration_seconds count = %d, want one per commit = %d", got, st.Commits)
	}
	if got := g.value(t, "touchledger_buffered_events", ""); got != 0 {
		t.Errorf("buffered_events = %v after a drained replay, want 0", got)
	}
}

// TestCreditedGaugesEqualCreditAnswer checks every (model, channel) gauge
// against `query credit` for the same window, and the rule models' total
// against the purchases in the window counted from the raw events.
func TestCreditedGaugesEqualCreditAnswer(t *testing.T) {
	f := openFixture(t)
	f.replay(t)
	reg := prometheus.NewPedanticRegistry()
	metrics.New(reg, metrics.Options{Status: f.proc, OpenQuerier: f.open, MaxChannels: 100})
	g := gather(t, reg)
	q := f.querier(t)

	// Window [floor to 5 minutes of latest+1ns−7d, …): conversions count at
	// their time's 5-minute bucket (docs/storage.md).
	start := (f.latest().Add(time.Nanosecond-metrics.DefaultWindow).Unix() / 300) * 300
	var purchases int64
	for _, e := range f.events {
		if e.Kind == "action" && e.Action == "order" && e.Time.Unix() >= start {
			purchases++
		}
	}
	if purchases == 0 {
		t.Fatal("no purchases in the window: fixture too small")
	}
	for _, model := range query.Models() {
		a, err := q.Credit(model, query.ByChannel, 0, query.Span{Last: metrics.DefaultWindow})
		if err != nil {
			t.Fatal(err)
		}
		if !query.IsDataDriven(model) && a.Conversions != purchases {
			t.Errorf("%s: credit answer has %d conversions, raw events %d", model, a.Conversions, purchases)
		}
		var sumConv, sumValue float64
		for _, c := range a.Channels {
			labels := "channel=" + c.Channel + ",model=" + model
			if got := g.value(t, "touchledger_credited_conversions", labels); got != c.Conversions {
				t.Errorf("credited_conversions{%s} = %v, want %v", labels, got, c.Conversions)
			}
			if got := g.value(t, "touchledger_credited_value", labels); got != c.Value {
				t.Errorf("credited_value{%s} = %v, want %v", labels, got, c.Value)
			}
		}
		for k, m := range g["touchledger_credited_conversions"] {
			if strings.HasSuffix(k, ",model="+model) {
				sumConv += m.GetGauge().GetValue()
				sumValue += g["touchledger_credited_value"][k].GetGauge().GetValue()
			}
		}
		// Each conversion's shares sum to 1 and to its value (exact integers
		// for rule models; normalised shares for data-driven ones).
		if math.Abs(sumConv-float64(a.Conversions)) > 1e-6 {
			t.Errorf("%s: credited conversions sum to %v, want %d", model, sumConv, a.Conversions)
		}
		if math.Abs(sumValue-a.Value) > 1e-6*math.Max(1, a.Value) {
			t.Errorf("%s: credited value sums to %v, want %v", model, sumValue, a.Value)
		}
	}
}

func TestChannelLabelsCapped(t *testing.T) {
	f := openFixture(t)
	f.replay(t)
	const limit = 3
	reg := prometheus.NewPedanticRegistry()
	metrics.New(reg, metrics.Options{Status: f.proc, OpenQuerier: f.open, MaxChannels: limit})
	g := gather(t, reg)
	q := f.querier(t)
	for _, model := range query.Models() {
		a, err := q.Credit(model, query.ByChannel, 0, query.Span{Last: metrics.DefaultWindow})
		if err != nil {
			t.Fatal(err)
		}
		if len(a.Channels) <= limit {
			t.Fatalf("%s: only %d channels, the cap is not exercised", model, len(a.Channels))
		}
		var n int
		var sum, wantSum float64
		for k, m := range g["touchledger_credited_conversions"] {
			if strings.HasSuffix(k, ",model="+model) {
				n++
				sum += m.GetGauge().GetValue()
			}
		}
		for _, c := range a.Channels {
			wantSum += c.Conversions
		}
		if n != limit {
			t.Errorf("%s: %d channel label values, want %d", model, n, limit)
		}
		if _, ok := g["touchledger_credited_conversions"]["channel=other,model="+model]; !ok {
			t.Errorf("%s: no channel=\"other\"", model)
		}
		if math.Abs(sum-wantSum) > 1e-9*math.Max(1, math.Abs(wantSum)) {
			t.Errorf("%s: capped sum %v, want %v", model, sum, wantSum)
		}
	}
}

func TestCapChannels(t *testing.T) {
	row := func(ch string, conv, value float64) query.ChannelCredit {
		return query.ChannelCredit{Channel: ch, Conversions: conv, Value: value}
	}
	cases := []struct {
		name  string
		rows  []query.ChannelCredit
		limit int
		want  []metrics.ChannelTotal
	}{
		{"under the limit keeps all, sorted by name",
			[]query.ChannelCredit{row("b", 1, 10), row("a", 2, 20)}, 3,
			[]metrics.ChannelTotal{{"a", 2, 20}, {"b", 1, 10}}},
		{"over the limit keeps limit-1 and sums the rest",
			[]query.ChannelCredit{row("a", 5, 50), row("b", 1, 10), row("c", 3, 30), row("d", 2, 20)}, 3,
			[]metrics.ChannelTotal{{"a", 5, 50}, {"c", 3, 30}, {"other", 3, 30}}},
		{"a real channel named other joins the sum",
			[]query.ChannelCredit{row("other", 9, 90), row("a", 5, 50), row("b", 1, 10)}, 2,
			[]metrics.ChannelTotal{{"a", 5, 50}, {"other", 10, 100}}},
		{"negative shapley shares rank by magnitude",
			[]query.ChannelCredit{row("a", 1, 10), row("b", -4, -40), row("c", 2, 20)}, 2,
			[]metrics.ChannelTotal{{"b", -4, -40}, {"other", 3, 30}}},
		{"ties by value, then name",
			[]query.ChannelCredit{row("z", 1, 10), row("y", 1, 30), row("x", 1, 10)}, 3,
			[]metrics.ChannelTotal{{"x", 1, 10}, {"y", 1, 30}, {"z", 1, 10}}},
		{"ties over the limit",
			[]query.ChannelCredit{row("z", 1, 10), row("y", 1, 30), row("x", 1, 10)}, 2,
			[]metrics.ChannelTotal{{"other", 2, 20}, {"y", 1, 30}}},
		{"limit 1 sums everything",
			[]query.ChannelCredit{row("a", 1, 10), row("b", 2, 20)}, 1,
			[]metrics.ChannelTotal{{"other", 3, 30}}},
		{"no rows", nil, 4, []metrics.ChannelTotal{}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got := metrics.CapChannels(c.rows, c.limit)
			if len(got) != len(c.want) {
				t.Fatalf("got %v, want %v", got, c.want)
			}
			for i := range got {
				if got[i] != c.want[i] {
					t.Errorf("got %v, want %v", got, c.want)
					break
				}
			}
		})
	}
}

// TestOpenSessionsAndJourneys checks the documented approximations against
// a count from the raw events: sessions (actions cut by gaps of 30 minutes
// or more, Catledge & Pitkow 1995 as in the README) whose last action lies
// in the window [floor to 5 minutes of latest+1ns−30m, …); journeys with a
// touch after the user's last purchase (the 10-day fixture is shorter than
// the 30-day journey timeout, so no journey ends by timeout).
func TestOpenSessionsAndJourneys(t *testing.T) {
	f := openFixture(t)
	f.replay(t)
	reg := prometheus.NewPedanticRegistry()
	metrics.New(reg, metrics.Options{Status: f.proc, OpenQuerier: f.open})
	g := gather(t, reg)

	start := (f.latest().Add(time.Nanosecond-metrics.DefaultSessionGap).Unix() / 300) * 300
	var sessions, journeys int
	for _, es := range f.byUser() {
		var last time.Time
		touchesSinceConversion := 0
		for _, e := range es {
			if e.Kind == "touch" {
				touchesSinceConversion++
				continue
			}
			if e.Action == "order" {
				touchesSinceConversion = 0
			}
			if !last.IsZero() && e.Time.Sub(last) >= metrics.DefaultSessionGap && last.Unix() >= start {
				sessions++ // the session that ended at last
			}
			last = e.Time
		}
		if !last.IsZero() && last.Unix() >= start {
			sessions++
		}
		if touchesSinceConversion > 0 {
			journeys++
		}
	}
	if sessions == 0 || journeys == 0 {
		t.Fatalf("fixture has %d open sessions and %d open journeys: too small", sessions, journeys)
	}
	if got := g.value(t, "touchledger_open_sessions", ""); got != float64(sessions) {
		t.Errorf("open_sessions = %v, want %d", got, sessions)
	}
	if got := g.value(t, "touchledger_open_journeys", ""); got != float64(journeys) {
		t.Errorf("open_journeys = %v, want %d", got, journeys)
	}
}

// watermarkStatus reports the processor's status with another watermark.
type watermarkStatus struct {
	p  *pipeline.Processor
	wm time.Time
}

func (w watermarkStatus) Status() pipeline.Status {
	st := w.p.Status()
	st.Watermark = w.wm
	return st
}

func TestAbandonmentAndAlertGauges(t *testing.T) {
	f := openFixture(t)
	f.replay(t)
	// A watermark at 16:20 on the fixture's last day (the checkout outage is
	// at 15:00–15:40) with hour intervals: the last complete interval is
	// 15:00–16:00, busy enough to have sessions at every step.
	last := f.latest().Truncate(day)
	wm := last.Add(16*time.Hour + 20*time.Minute)
	reg := prometheus.NewPedanticRegistry()
	metrics.New(reg, metrics.Options{Status: watermarkStatus{f.proc, wm}, OpenQuerier: f.open, Interval: time.Hour})
	g := gather(t, reg)
	q := f.querier(t)

	from, to := last.Add(15*time.Hour), last.Add(16*time.Hour)
	fa, err := q.Funnel(query.Span{From: from, To: to})
	if err != nil {
		t.Fatal(err)
	}
	if fa.Sessions == 0 {
		t.Fatalf("no sessions in [%s, %s): fixture too small", from, to)
	}
	for i, s := range fa.Steps {
		_, exported := g["touchledger_abandonment_ratio"]["step="+s.Step]
		if wantOut := i == len(fa.Steps)-1 || s.Sessions == 0; wantOut {
			if s.Abandonment != nil {
				t.Errorf("step %s: abandonment %v, want nil (unknown) for the last step or a step with no sessions", s.Step, *s.Abandonment)
			}
			if exported {
				t.Errorf("abandonment_ratio{step=%s} exported for a step with no sessions or the last step", s.Step)
			}
			continue
		}
		if s.Abandonment == nil {
			t.Errorf("step %s with %d sessions: abandonment nil", s.Step, s.Sessions)
			continue
		}
		if got := g.value(t, "touchledger_abandonment_ratio", "step="+s.Step); got != *s.Abandonment {
			t.Errorf("abandonment_ratio{step=%s} = %v, want %v", s.Step, got, *s.Abandonment)
		}
	}
	if len(g["touchledger_abandonment_ratio"]) < 2 {
		t.Errorf("abandonment_ratio exported for %d steps, want at least 2 in a busy hour", len(g["touchledger_abandonment_ratio"]))
	}

	all, err := q.Alerts(query.Span{Last: 400 * day}, false)
	if err != nil {
		t.Fatal(err)
	}
	want := 0.0
	for _, a := range all.Alerts {
		if a.Open {
			want = 1
		}
	}
	if got := g.value(t, "touchledger_alert_open", "name="+all.Name); got != want {
		t.Errorf("alert_open{name=%s} = %v, want %v", all.Name, got, want)
	}
}

func TestLastCompleteInterval(t *testing.T) {
	ts := func(s string) time.Time {
		t, err := time.Parse(time.RFC3339Nano, s)
		if err != nil {
			panic(err)
		}
		return t
	}
	cases := []struct {
		wm, latest string
		interval   time.Duration
		from, to   string
	}{
		{"2026-10-10T12:07:30Z", "2026-10-10T12:12:30Z", 5 * time.Minute, "2026-10-10T12:00:00Z", "2026-10-10T12:05:00Z"},
		{"2026-10-10T12:05:00Z", "2026-10-10T12:10:00Z", 5 * time.Minute, "2026-10-10T12:00:00Z", "2026-10-10T12:05:00Z"},
		{"2026-10-10T12:04:59.999Z", "2026-10-10T12:10:00Z", 5 * time.Minute, "2026-10-10T11:55:00Z", "2026-10-10T12:00:00Z"},
		{"0001-01-01T00:00:00Z", "2026-10-10T12:59:00Z", time.Hour, "2026-10-10T11:00:00Z", "2026-10-10T12:00:00Z"},
		{"1969-12-31T23:58:00Z", "1969-12-31T23:59:00Z", 5 * time.Minute, "1969-12-31T23:50:00Z", "1969-12-31T23:55:00Z"},
	}
	for _, c := range cases {
		from, to := metrics.LastCompleteInterval(ts(c.wm), ts(c.latest), c.interval)
		if !from.Equal(ts(c.from)) || !to.Equal(ts(c.to)) {
			t.Errorf("LastCompleteInterval(%s, %s, %s) = [%s, %s), want [%s, %s)", c.wm, c.latest, c.interval, from, to, c.from, c.to)
		}
	}
}

// fakeStatus is a StatusSource with a fixed status.
type fakeStatus struct{ st pipeline.Status }

func (f *fakeStatus) Status() pipeline.Status { return f.st }

func TestWatermarkDelayAndConsumerLag(t *testing.T) {
	wm := time.Date(2026, 10, 10, 12, 0, 0, 0, time.UTC)
	now := wm.Add(90 * time.Second)
	st := &fakeStatus{pipeline.Status{Commits: 1, Watermark: wm, Buffered: 17, Counts: pipeline.Counts{Accepted: 5}}}
	cases := []struct {
		name    string
		lag     metrics.ConsumerLagFunc
		wantLag float64 // -1: not exported
		wantErr string
	}{
		{"no lag source", nil, -1, ""},
		{"lag", func(context.Context) (uint64, error) { return 42, nil }, 42, ""},
		{"lag fails", func(context.Context) (uint64, error) { return 0, errors.New("no responders") }, -1, "no responders"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			reg := prometheus.NewPedanticRegistry()
			metrics.New(reg, metrics.Options{Status: st, ConsumerLag: c.lag, Now: func() time.Time { return now }})
			fams, err := reg.Gather()
			if c.wantErr == "" && err != nil || c.wantErr != "" && (err == nil || !strings.Contains(err.Error(), c.wantErr)) {
				t.Fatalf("gather error %v, want %q", err, c.wantErr)
			}
			g := index(fams)
			if got := g.value(t, "touchledger_watermark_delay_seconds", ""); got != 90 {
				t.Errorf("watermark_delay_seconds = %v, want 90", got)
			}
			if got := g.value(t, "touchledger_buffered_events", ""); got != 17 {
				t.Errorf("buffered_events = %v, want 17", got)
			}
			if got := g.value(t, "touchledger_events_total", "outcome=accepted"); got != 5 {
				t.Errorf("events_total{accepted} = %v, want 5", got)
			}
			_, has := g["touchledger_consumer_lag_messages"]
			switch {
			case c.wantLag < 0 && has:
				t.Errorf("consumer_lag_messages exported, want none")
			case c.wantLag >= 0 && g.value(t, "touchledger_consumer_lag_messages", "") != c.wantLag:
				t.Errorf("consumer_lag_messages = %v, want %v", g.value(t, "touchledger_consumer_lag_messages", ""), c.wantLag)
			}
		})
	}
}

func TestNothingBeforeFirstCommitOrData(t *testing.T) {
	st := &fakeStatus{}
	noData := func() (*query.Querier, error) { return nil, query.ErrNoData }
	reg := prometheus.NewPedanticRegistry()
	metrics.New(reg, metrics.Options{Status: st, OpenQuerier: noData})
	g := gather(t, reg)
	for _, name := range []string{"touchledger_events_total", "touchledger_rejects_total", "touchledger_watermark_delay_seconds",
		"touchledger_credited_conversions", "touchledger_open_sessions", "touchledger_alert_open"} {
		if _, ok := g[name]; ok {
			t.Errorf("%s exported before the first commit / without data", name)
		}
	}
	if got := g.value(t, "touchledger_buffered_events", ""); got != 0 {
		t.Errorf("buffered_events = %v, want 0", got)
	}
}

// countingStatus reports the processor's status with Commits replaced.
type countingStatus struct {
	p       *pipeline.Processor
	commits atomic.Int64
}

func (c *countingStatus) Status() pipeline.Status {
	st := c.p.Status()
	st.Commits = int(c.commits.Load())
	return st
}

func TestWindowRecomputedOnlyAfterCommit(t *testing.T) {
	f := openFixture(t)
	f.replay(t)
	st := &countingStatus{p: f.proc}
	st.commits.Store(1)
	var opened atomic.Int64
	open := func() (*query.Querier, error) {
		opened.Add(1)
		return f.open()
	}
	reg := prometheus.NewPedanticRegistry()
	metrics.New(reg, metrics.Options{Status: st, OpenQuerier: open, Models: []string{"linear"}})
	steps := []struct {
		commits    int64
		wantOpened int64
	}{{1, 1}, {1, 1}, {2, 2}, {2, 2}, {3, 3}}
	for i, s := range steps {
		st.commits.Store(s.commits)
		g := gather(t, reg)
		if _, ok := g["touchledger_credited_conversions"]["channel=direct,model=linear"]; !ok {
			t.Fatalf("scrape %d: credited_conversions{model=linear,channel=direct} missing", i)
		}
		if got := opened.Load(); got != s.wantOpened {
			t.Errorf("scrape %d (commits %d): opened %d snapshots, want %d", i, s.commits, got, s.wantOpened)
		}
	}
}

func TestOptionsValidate(t *testing.T) {
	st := &fakeStatus{}
	cases := []struct {
		name string
		o    metrics.Options
		ok   bool
	}{
		{"defaults", metrics.Options{Status: st}, true},
		{"no status", metrics.Options{}, false},
		{"negative window", metrics.Options{Status: st, Window: -time.Hour}, false},
		{"negative channels", metrics.Options{Status: st, MaxChannels: -1}, false},
		{"sub-second interval", metrics.Options{Status: st, Interval: 1500 * time.Millisecond}, false},
		{"unknown model", metrics.Options{Status: st, Models: []string{"linear", "hunch"}}, false},
		{"model twice", metrics.Options{Status: st, Models: []string{"linear", "linear"}}, false},
		{"data-driven models", metrics.Options{Status: st, Models: []string{"markov", "shapley"}}, true},
	}
	for _, c := range cases {
		if err := c.o.Validate(); (err == nil) != c.ok {
			t.Errorf("%s: Validate() = %v, want ok=%v", c.name, err, c.ok)
		}
	}
}
