package metrics_test

import (
	"bytes"
	"context"
	"encoding/json"
	"path/filepath"
	"sort"
	"testing"
	"time"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/state"
)

// fixture is a real Badger directory filled by pipeline.Replay from demo
// events plus four inputs with known outcomes.
type fixture struct {
	cfg      config.Config
	store    *state.Store
	proc     *pipeline.Processor
	events   []rawEvent // the generated events (all valid and unique)
	stats    shop.Stats
	input    []byte
	onCommit func(time.Duration) // set before replay
}

type rawEvent struct {
	ID     string    `json:"id"`
	User   string    `json:"user"`
	Time   time.Time `json:"time"`
	Kind   string    `json:"kind"`
	Action string    `json:"action"`
}

// extraLines are appended to the demo events: invalid JSON, a bad kind, a
// repeat of the last generated line (duplicate) and the first generated line
// with a new id (late: ten days older than the watermark).
func extraLines(first, last []byte) []byte {
	var b bytes.Buffer
	b.WriteString("{\"id\": \"junk-1\", \"user\": \n")
	b.WriteString(`{"id":"junk-2","user":"v9999999","time":"2026-10-01T00:00:00Z","kind":"teleport"}` + "\n")
	b.Write(last)
	b.WriteByte('\n')
	b.Write(bytes.Replace(first, []byte(`"id":"`), []byte(`"id":"late-`), 1))
	b.WriteByte('\n')
	return b.Bytes()
}

// wantCounts are the outcomes the input was built to have (see extraLines).
func (f *fixture) wantCounts() pipeline.Counts {
	return pipeline.Counts{
		Accepted:  uint64(f.stats.Events),
		Duplicate: 1,
		Late:      1,
		Rejected:  map[event.Reason]uint64{event.ReasonBadJSON: 1, event.ReasonBadKind: 1},
	}
}

func openFixture(t testing.TB) *fixture {
	t.Helper()
	c := shop.DefaultConfig()
	c.Visitors, c.Days, c.ShiftDay, c.IncidentDay = 400, 10, 5, 9
	var buf bytes.Buffer
	stats, err := shop.Generate(&buf, c)
	if err != nil {
		t.Fatal(err)
	}
	lines := bytes.Split(bytes.TrimSpace(buf.Bytes()), []byte("\n"))
	f := &fixture{cfg: config.Default(), stats: stats}
	for _, l := range lines {
		var e rawEvent
		if err := json.Unmarshal(l, &e); err != nil {
			t.Fatal(err)
		}
		f.events = append(f.events, e)
	}
	f.input = append(buf.Bytes(), extraLines(lines[0], lines[len(lines)-1])...)

	dir := t.TempDir()
	f.store, err = state.Open(context.Background(), pipeline.StoreOptions(dir, f.cfg))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { f.store.Close() })
	rejects, err := pipeline.OpenRejectFile(filepath.Join(dir, "rejects.jsonl"))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { rejects.Close() })
	pc := pipeline.FromConfig(f.cfg)
	pc.CommitEvents = 400 // several commits
	pc.OnCommit = func(string, pipeline.Checkpoint) {
		if f.onCommit != nil {
			f.onCommit(f.proc.Status().CommitTook)
		}
	}
	f.proc, err = pipeline.New(f.store, pc, rejects, nil)
	if err != nil {
		t.Fatal(err)
	}
	return f
}

func (f *fixture) replay(t testing.TB) pipeline.Checkpoint {
	t.Helper()
	cp, err := pipeline.Replay(context.Background(), f.proc, "demo.jsonl", bytes.NewReader(f.input), f.cfg.Limits.MaxPayload)
	if err != nil {
		t.Fatal(err)
	}
	if err := f.proc.Close(); err != nil {
		t.Fatal(err)
	}
	return cp
}

func (f *fixture) open() (*query.Querier, error) {
	return query.NewQuerier(f.store, query.ParamsFrom(f.cfg))
}

func (f *fixture) querier(t *testing.T) *query.Querier {
	t.Helper()
	q, err := f.open()
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(q.Close)
	return q
}

// latest is the largest event time of the generated events.
func (f *fixture) latest() time.Time {
	var l time.Time
	for _, e := range f.events {
		if e.Time.After(l) {
			l = e.Time
		}
	}
	return l
}

// byUser returns each user's events in time order (generation order on
// ties, which is the input order).
func (f *fixture) byUser() map[string][]rawEvent {
	out := map[string][]rawEvent{}
	for _, e := range f.events {
		out[e.User] = append(out[e.User], e)
	}
	for _, es := range out {
		sort.SliceStable(es, func(i, j int) bool { return es[i].Time.Before(es[j].Time) })
	}
	return out
}
