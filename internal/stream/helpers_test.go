package stream

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"github.com/cespare/xxhash/v2"
	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/credit"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/state"
)

// bus is an embedded server with a connection, for one test.
type bus struct {
	url string
	nc  *nats.Conn
	js  jetstream.JetStream
	cfg Config
}

func xxhashSum(s string) uint64 { return xxhash.Sum64String(s) }

func connectJS(t testing.TB, url string) (*nats.Conn, jetstream.JetStream) {
	t.Helper()
	nc, err := nats.Connect(url)
	if err != nil {
		t.Fatal(err)
	}
	js, err := jetstream.New(nc)
	if err != nil {
		t.Fatal(err)
	}
	return nc, js
}

func startBus(t testing.TB, cfg Config) *bus {
	t.Helper()
	srv, url, err := StartEmbedded(t.TempDir(), EmbedPort(0), EmbedConfig(cfg))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { srv.Shutdown(); srv.WaitForShutdown() })
	nc, js := connectJS(t, url)
	t.Cleanup(nc.Close)
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	if err := EnsureStream(ctx, js, cfg); err != nil {
		t.Fatal(err)
	}
	return &bus{url: url, nc: nc, js: js, cfg: cfg}
}

func (b *bus) send(t testing.TB, input []byte) SendStats {
	t.Helper()
	st, err := Send(context.Background(), b.js, bytes.NewReader(input), SendOptions{Prefix: b.cfg.Prefix})
	if err != nil {
		t.Fatal(err)
	}
	return st
}

func (b *bus) lastSeq(t testing.TB) uint64 {
	t.Helper()
	s, err := b.js.Stream(context.Background(), b.cfg.Stream)
	if err != nil {
		t.Fatal(err)
	}
	return s.CachedInfo().State.LastSeq
}

// demoInput is the invented shop's events (fixed seed): visitors over days.
func demoInput(t testing.TB, visitors, days int) []byte {
	t.Helper()
	c := shop.DefaultConfig()
	c.Visitors, c.Days = visitors, days
	c.ShiftDay, c.IncidentDay = days/2, days-1
	var buf bytes.Buffer
	if _, err := shop.Generate(&buf, c); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

// withJunk inserts an invalid line (bad time) after every n-th line.
func withJunk(input []byte, n int) ([]byte, int) {
	lines := strings.Split(strings.TrimSpace(string(input)), "\n")
	var b strings.Builder
	junk := 0
	for i, l := range lines {
		b.WriteString(l)
		b.WriteByte('\n')
		if i%n == n-1 {
			fmt.Fprintf(&b, `{"id":"junk-%d","user":"u%d","time":"yesterday","kind":"touch","channel":"x"}`+"\n", i, i)
			junk++
		}
	}
	return []byte(b.String()), junk
}

func processorConfig() pipeline.Config { return pipeline.FromConfig(config.Default()) }

func openStore(t testing.TB, dir string) *state.Store {
	t.Helper()
	st, err := state.Open(context.Background(), pipeline.StoreOptions(dir, config.Default()))
	if err != nil {
		t.Fatal(err)
	}
	return st
}

// replayInto replays input into a new directory and returns it with the counts.
func replayInto(t testing.TB, input []byte, pcfg pipeline.Config) (string, pipeline.Counts) {
	t.Helper()
	dir := t.TempDir()
	st := openStore(t, dir)
	defer st.Close()
	p, err := pipeline.New(st, pcfg, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	cp, err := pipeline.Replay(context.Background(), p, "file", bytes.NewReader(input), 64<<10)
	if cerr := p.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		t.Fatal(err)
	}
	return dir, cp.Counts
}

// fakeClock is the wall clock plus an adjustable offset.
type fakeClock struct{ offset atomic.Int64 }

func (c *fakeClock) now() time.Time          { return time.Now().Add(time.Duration(c.offset.Load())) }
func (c *fakeClock) advance(d time.Duration) { c.offset.Add(int64(d)) }

// liveWorker runs a Worker over its own store on a goroutine.
type liveWorker struct {
	w      *Worker
	p      *pipeline.Processor
	st     *state.Store
	cancel context.CancelFunc
	done   chan error
}

func startWorker(t testing.TB, b *bus, dir string, pcfg pipeline.Config, cfg Config, parts Partitions) *liveWorker {
	t.Helper()
	w, err := NewWorker(b.js, cfg, parts, nil)
	if err != nil {
		t.Fatal(err)
	}
	return runWorker(t, w, dir, pcfg)
}

// runWorker runs w over a new store in dir on a goroutine.
func runWorker(t testing.TB, w *Worker, dir string, pcfg pipeline.Config) *liveWorker {
	t.Helper()
	st := openStore(t, dir)
	p, err := pipeline.New(st, w.ProcessorConfig(pcfg), w.DeadLetters(), nil)
	if err != nil {
		st.Close()
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	lw := &liveWorker{w: w, p: p, st: st, cancel: cancel, done: make(chan error, 1)}
	go func() { lw.done <- w.Run(ctx, p) }()
	return lw
}

// stop ends the run gracefully and closes the store.
func (lw *liveWorker) stop(t testing.TB) {
	t.Helper()
	lw.cancel()
	err := <-lw.done
	if cerr := lw.p.Close(); err == nil {
		err = cerr
	}
	if cerr := lw.st.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		t.Fatalf("worker: %v", err)
	}
}

// waitFor polls cond every 10 ms until it holds or the timeout passes.
func (lw *liveWorker) waitFor(t testing.TB, timeout time.Duration, what string, cond func(pipeline.Status) bool) pipeline.Status {
	t.Helper()
	deadline := time.Now().Add(timeout)
	for {
		s := lw.p.Status()
		if cond(s) {
			return s
		}
		select {
		case err := <-lw.done:
			t.Fatalf("worker ended while waiting for %s: %v", what, err)
		default:
		}
		if time.Now().After(deadline) {
			t.Fatalf("timed out waiting for %s; status %+v", what, s)
		}
		time.Sleep(10 * time.Millisecond)
	}
}

// answersJSON is every query answer over [from, to) as JSON: credit under
// every model by channel and campaign, transitions and paths at both
// levels, the funnel and the alerts.
func answersJSON(t testing.TB, dir string, from, to time.Time) string {
	t.Helper()
	st := openStore(t, dir)
	defer st.Close()
	return storeAnswers(t, st, from, to)
}

// storeAnswers is answersJSON from an open store (a live worker's: Badger
// allows readers beside the writer).
func storeAnswers(t testing.TB, st *state.Store, from, to time.Time) string {
	t.Helper()
	q, err := query.NewQuerier(st, query.ParamsFrom(config.Default()))
	if err != nil {
		t.Fatal(err)
	}
	defer q.Close()
	span := query.Span{From: from, To: to}
	out := map[string]any{}
	models := []string{query.ModelMarkov, query.ModelShapley}
	for _, m := range credit.RuleModels {
		models = append(models, m.String())
	}
	for _, m := range models {
		for _, by := range []string{query.ByChannel, query.ByCampaign} {
			if query.IsDataDriven(m) && by != query.ByChannel {
				continue
			}
			a, err := q.Credit(m, by, 0, span)
			if err != nil {
				t.Fatalf("credit %s by %s: %v", m, by, err)
			}
			out["credit/"+m+"/"+by] = a
		}
	}
	for _, level := range []string{"channel", "action"} {
		tr, err := q.Transitions(level, 1, span)
		if err != nil {
			t.Fatalf("transitions %s: %v", level, err)
		}
		out["transitions/"+level] = tr
		pa, err := q.Paths(level, 20, span)
		if err != nil {
			t.Fatalf("paths %s: %v", level, err)
		}
		out["paths/"+level] = pa
	}
	fu, err := q.Funnel(span)
	if err != nil {
		t.Fatal(err)
	}
	out["funnel"] = fu
	al, err := q.Alerts(span, true)
	if err != nil {
		t.Fatal(err)
	}
	out["alerts"] = al
	b, err := json.Marshal(out)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

// firstDifference returns the neighbourhood of the first differing byte.
func firstDifference(a, b string) string {
	i := 0
	for i < len(a) && i < len(b) && a[i] == b[i] {
		i++
	}
	lo := max(0, i-80)
	return fmt.Sprintf("at byte %d:\n got …%.200s\nwant …%.200s", i, a[lo:], b[lo:])
}
