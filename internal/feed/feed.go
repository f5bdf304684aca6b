package feed

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"time"

	"github.com/nats-io/nats.go"

	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/tally"
)

// Defaults of Options.
const (
	DefaultPrefix         = "tl"
	DefaultPoll           = time.Second
	DefaultReportInterval = time.Minute
	DefaultReportWindow   = 7 * 24 * time.Hour
	DefaultLookback       = 7 * 24 * time.Hour
)

// Headers on feed messages.
const (
	HeaderPartitions = "Tl-Partitions" // the publishing worker's range
	HeaderMsgID      = "Nats-Msg-Id"   // alert messages: <range>-<name>-<opened Unix s>-<event>
)

// Options configure a Feed.
type Options struct {
	Conn       *nats.Conn                     // publishes; the caller keeps ownership
	Prefix     string                         // subject prefix (default "tl")
	Partitions string                         // the worker's partition range, "0-7"
	Open       func() (*query.Querier, error) // a querier on a snapshot of the worker's store
	// Watermark returns the committed watermark (safe for concurrent use):
	// pipeline.Processor.Status().Watermark.
	Watermark func() time.Time
	// StartWatermark is the committed watermark before the worker starts
	// consuming (pipeline.Processor.Watermark before Run), for the start rule.
	StartWatermark time.Time
	SessionGap     time.Duration // config session_gap: how long a session can still grow
	Interval       time.Duration // config alert.interval
	// Lookback is how far back each evaluation lists alerts (default 7 days,
	// the alert baseline); the chart is warmed up over the alert baseline
	// before it (query.Querier.Alerts).
	Lookback time.Duration
	// StateFile keeps the last published state of every alert across
	// restarts ("" keeps it in memory only).
	StateFile string
	// Poll is how often the watermark is checked for newly final intervals
	// (default 1 s).
	Poll time.Duration
	// ReportInterval is the interval of credit snapshots; 0 disables them.
	ReportInterval time.Duration
	ReportWindow   time.Duration // rolling window of the credit snapshots (default 7 days)
	Models         []string      // models of the snapshots (default: every model)
	Log            *slog.Logger
	Now            func() time.Time // wall clock of the snapshots' "at" (default time.Now)
}

func (o *Options) defaults() error {
	switch {
	case o.Conn == nil:
		return errors.New("feed: no NATS connection")
	case o.Open == nil || o.Watermark == nil:
		return errors.New("feed: Open and Watermark are required")
	case o.Interval <= 0:
		return errors.New("feed: the alert interval must be positive")
	case o.SessionGap < 0 || o.Lookback < 0 || o.Poll < 0 || o.ReportInterval < 0 || o.ReportWindow < 0:
		return errors.New("feed: durations must not be negative")
	}
	if o.Prefix == "" {
		o.Prefix = DefaultPrefix
	}
	if o.Lookback == 0 {
		o.Lookback = DefaultLookback
	}
	if o.Poll == 0 {
		o.Poll = DefaultPoll
	}
	if o.ReportWindow == 0 {
		o.ReportWindow = DefaultReportWindow
	}
	if o.Models == nil {
		o.Models = query.Models()
	}
	if o.Log == nil {
		o.Log = slog.New(slog.DiscardHandler)
	}
	if o.Now == nil {
		o.Now = time.Now
	}
	return nil
}

// Feed publishes a worker's alert transitions and credit snapshots.
type Feed struct {
	o      Options
	states map[string]nameState // alert name → last published state
	last   time.Time            // the settled boundary of the last evaluation
	retry  bool                 // the last publication failed: evaluate again
	cancel context.CancelFunc
	done   chan struct{}
	once   sync.Once
}

// Start applies the start rule (see the package documentation) on the
// committed data as it is now — call it before the worker consumes — and
// starts publishing on a goroutine until ctx ends or Stop.
func Start(ctx context.Context, o Options) (*Feed, error) {
	if err := o.defaults(); err != nil {
		return nil, err
	}
	f := &Feed{o: o, done: make(chan struct{})}
	states, found, err := loadState(o.StateFile)
	if err != nil {
		// Unreadable: what was announced is unknown; the start rule for a
		// missing file applies (at worst a transition is not announced).
		o.Log.Error("alert feed: state file unreadable, starting from the committed data", "err", err)
		states, found = map[string]nameState{}, false
	}
	f.states = states
	start := f.settled(o.StartWatermark)
	q, err := o.Open()
	switch {
	case errors.Is(err, query.ErrNoData) || (err == nil && start.IsZero()):
		if q != nil {
			q.Close()
		}
		// Nothing committed: nothing can have been announced.
	case err != nil:
		return nil, fmt.Errorf("feed: %w", err)
	default:
		a, err := f.evaluate(q, start)
		q.Close()
		if err != nil {
			return nil, err
		}
		if _, ok := f.states[a.Name]; !ok {
			// No remembered state for this alert (no state file: a data
			// directory from before feeds, or restored from a backup; or a
			// new alert step): what the committed data shows counts as
			// announced.
			f.states[a.Name] = baseline(a.Alerts)
			found = false
		}
	}
	if !found {
		if err := saveState(o.StateFile, o.Partitions, f.states); err != nil {
			return nil, err
		}
	}
	ctx, f.cancel = context.WithCancel(ctx)
	go f.run(ctx)
	return f, nil
}

// Stop ends publishing and waits for the goroutine.
func (f *Feed) Stop() {
	f.once.Do(func() {
		f.cancel()
		<-f.done
	})
}

func (f *Feed) run(ctx context.Context) {
	defer close(f.done)
	poll := time.NewTicker(f.o.Poll)
	defer poll.Stop()
	var report <-chan time.Time
	if f.o.ReportInterval > 0 {
		t := time.NewTicker(f.o.ReportInterval)
		defer t.Stop()
		report = t.C
	}
	f.checkAlerts()
	for {
		select {
		case <-ctx.Done():
			return
		case <-poll.C:
			f.checkAlerts()
		case <-report:
			f.report()
		}
	}
}

// settled is the end of the last final alert interval at watermark wm:
// the largest multiple of the interval (from the Unix epoch) at or before
// wm − session gap. No event applied later can change a session that ended
// before it (such an event is at or after the watermark, so at least a
// session gap after that session's last event: a new session).
func (f *Feed) settled(wm time.Time) time.Time {
	if wm.IsZero() {
		return time.Time{}
	}
	step := int64(f.o.Interval / time.Second)
	return time.Unix(tally.FloorDiv(wm.Add(-f.o.SessionGap).Unix(), step)*step, 0).UTC()
}

// evaluate lists the alerts of the final intervals before settled.
func (f *Feed) evaluate(q *query.Querier, settled time.Time) (query.AlertsAnswer, error) {
	a, err := q.Answer(query.Request{Kind: query.KindAlerts, Window: query.Span{From: settled.Add(-f.o.Lookback), To: settled}})
	if err != nil {
		return query.AlertsAnswer{}, fmt.Errorf("feed: alerts: %w", err)
	}
	return *a.Alerts, nil
}

// checkAlerts evaluates the chart when more intervals became final and
// publishes the transitions.
func (f *Feed) checkAlerts() {
	settled := f.settled(f.o.Watermark())
	if settled.IsZero() || (!f.retry && !settled.After(f.last)) {
		return
	}
	q, err := f.o.Open()
	if errors.Is(err, query.ErrNoData) {
		return
	}
	if err != nil {
		f.o.Log.Warn("alert feed: open the store", "err", err)
		return
	}
	a, err := f.evaluate(q, settled)
	q.Close()
	if err != nil {
		f.o.Log.Warn("alert feed", "err", err)
		return
	}
	prev := f.states[a.Name]
	recs, evs, next := transitions(prev, a.Alerts, settled)
	f.retry = true
	if len(recs) > 0 {
		for i, r := range recs {
			if err := f.publishAlert(a.Name, evs[i], r); err != nil {
				f.o.Log.Warn("alert feed: publish", "err", err)
				return
			}
		}
		if err := f.o.Conn.FlushTimeout(10 * time.Second); err != nil {
			f.o.Log.Warn("alert feed: flush", "err", err)
			return
		}
	}
	f.retry = false
	f.last = settled
	if !sameState(prev, next) {
		f.states[a.Name] = next
		if err := saveState(f.o.StateFile, f.o.Partitions, f.states); err != nil {
			f.o.Log.Warn("alert feed: save state", "err", err)
		}
	}
}

// AlertSubject is the subject of an alert's transitions:
// <prefix>.alert.<name>, the name made one subject token (characters other
// than letters, digits, '-' and '_' become '_').
func AlertSubject(prefix, name string) string { return prefix + ".alert." + token(name) }

// ReportSubject is the subject of credit snapshots: <prefix>.report.credit.
func ReportSubject(prefix string) string { return prefix + ".report.credit" }

func token(s string) string {
	return strings.Map(func(r rune) rune {
		switch {
		case r >= 'a' && r <= 'z', r >= 'A' && r <= 'Z', r >= '0' && r <= '9', r == '-', r == '_':
			return r
		}
		return '_'
	}, s)
}

func (f *Feed) publishAlert(name, ev string, r query.AlertRecord) error {
	body, err := json.Marshal(AlertMessage{Event: ev, AlertRecord: r, Partitions: f.o.Partitions})
	if err != nil {
		return err
	}
	m := nats.NewMsg(AlertSubject(f.o.Prefix, name))
	m.Data = body
	m.Header.Set(HeaderPartitions, f.o.Partitions)
	m.Header.Set(HeaderMsgID, fmt.Sprintf("%s-%s-%d-%s", f.o.Partitions, token(name), r.Opened.Unix(), ev))
	f.o.Log.Info("alert "+ev, "name", name, "opened", r.Opened, "closed", r.Closed, "rate", r.Rate)
	return f.o.Conn.PublishMsg(m)
}

// CreditMessage is the body of <prefix>.report.credit: one model's credit
// over the rolling window, as `query credit --format json --last WINDOW`
// answers it from this worker's partitions.
type CreditMessage struct {
	query.CreditAnswer
	ModelID    string `json:"model_id"`   // the model as query credit --model names it ("model" is its display name)
	Window     string `json:"window"`     // the rolling window, e.g. "7d"
	Partitions string `json:"partitions"` // the publishing worker's range
	At         string `json:"at"`         // wall-clock time of the snapshot (RFC 3339)
}

// report publishes one credit snapshot per model.
func (f *Feed) report() {
	q, err := f.o.Open()
	if errors.Is(err, query.ErrNoData) {
		return
	}
	if err != nil {
		f.o.Log.Warn("credit feed: open the store", "err", err)
		return
	}
	defer q.Close()
	at := f.o.Now().UTC().Format(time.RFC3339)
	window := config.Duration(f.o.ReportWindow).String()
	for _, model := range f.o.Models {
		ans, err := q.Answer(query.Request{Kind: query.KindCredit, Model: model, Window: query.Span{Last: f.o.ReportWindow}})
		if err != nil {
			f.o.Log.Warn("credit feed", "model", model, "err", err)
			continue
		}
		body, err := json.Marshal(CreditMessage{CreditAnswer: *ans.Credit, ModelID: model, Window: window, Partitions: f.o.Partitions, At: at})
		if err != nil {
			f.o.Log.Warn("credit feed", "model", model, "err", err)
			continue
		}
		m := nats.NewMsg(ReportSubject(f.o.Prefix))
		m.Data = body
		m.Header.Set(HeaderPartitions, f.o.Partitions)
		if err := f.o.Conn.PublishMsg(m); err != nil {
			f.o.Log.Warn("credit feed: publish", "err", err)
			return
		}
	}
}

// stateFile is the JSON form of the last published alert states.
type stateFile struct {
	Version    int                  `json:"version"`
	Partitions string               `json:"partitions"`
	Alerts     map[string]nameState `json:"alerts"`
}

const stateVersion = 1

// loadState reads the state file; found is false when there is none.
func loadState(path string) (map[string]nameState, bool, error) {
	states := map[string]nameState{}
	if path == "" {
		return states, false, nil
	}
	b, err := os.ReadFile(path)
	if errors.Is(err, os.ErrNotExist) {
		return states, false, nil
	}
	if err != nil {
		return nil, false, fmt.Errorf("feed: %w", err)
	}
	var sf stateFile
	if err := json.Unmarshal(b, &sf); err != nil {
		return nil, false, fmt.Errorf("feed: state file %s: %w", path, err)
	}
	if sf.Version != stateVersion {
		return nil, false, fmt.Errorf("feed: state file %s: version %d, want %d", path, sf.Version, stateVersion)
	}
	for k, v := range sf.Alerts {
		states[k] = v
	}
	return states, true, nil
}

// saveState replaces the state file atomically (temporary file, sync,
// rename).
func saveState(path, partitions string, states map[string]nameState) error {
	if path == "" {
		return nil
	}
	b, err := json.MarshalIndent(stateFile{Version: stateVersion, Partitions: partitions, Alerts: states}, "", "  ")
	if err != nil {
		return err
	}
	tmp, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".*")
	if err != nil {
		return fmt.Errorf("feed: %w", err)
	}
	_, err = tmp.Write(append(b, '\n'))
	if err == nil {
		err = tmp.Sync()
	}
	if cerr := tmp.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = os.Rename(tmp.Name(), path)
	}
	if err != nil {
		os.Remove(tmp.Name())
		return fmt.Errorf("feed: save state: %w", err)
	}
	return nil
}

func sameState(a, b nameState) bool {
	if a.Done != b.Done || (a.Open == nil) != (b.Open == nil) {
		return false
	}
	return a.Open == nil || *a.Open == *b.Open
}
