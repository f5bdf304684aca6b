package web_test

import (
	"bytes"
	"context"
	"net/http"
	"net/http/httptest"
	"path/filepath"
	"testing"

	"github.com/prometheus/client_golang/prometheus"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/metrics"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/state"
	"github.com/touchledger/touchledger/internal/web"
)

// fixture is a real Badger directory filled by pipeline.Replay from demo
// events (plus one invalid line), its metrics, and a test server.
type fixture struct {
	cfg   config.Config
	store *state.Store
	proc  *pipeline.Processor
	cp    pipeline.Checkpoint
	reg   *prometheus.Registry
	srv   *httptest.Server
}

func newFixture(t *testing.T, opts web.Options) *fixture {
	t.Helper()
	c := shop.DefaultConfig()
	c.Visitors, c.Days, c.ShiftDay, c.IncidentDay = 400, 10, 5, 9
	var buf bytes.Buffer
	if _, err := shop.Generate(&buf, c); err != nil {
		t.Fatal(err)
	}
	buf.WriteString("{\"id\": \"junk\"\n")

	f := &fixture{cfg: config.Default(), reg: prometheus.NewPedanticRegistry()}
	dir := t.TempDir()
	var err error
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
	var m *metrics.Metrics
	pc := pipeline.FromConfig(f.cfg)
	pc.CommitEvents = 500
	pc.OnCommit = func(string, pipeline.Checkpoint) { m.ObserveCommit(f.proc.Status().CommitTook) }
	if f.proc, err = pipeline.New(f.store, pc, rejects, nil); err != nil {
		t.Fatal(err)
	}
	m = metrics.New(f.reg, metrics.Options{Status: f.proc, OpenQuerier: f.open, MaxChannels: 4,
		Build: metrics.BuildInfo{Version: "v1.2.3", Revision: "0123abc", GoVersion: "go1.26.8"}})
	if f.cp, err = pipeline.Replay(context.Background(), f.proc, "demo.jsonl", &buf, f.cfg.Limits.MaxPayload); err != nil {
		t.Fatal(err)
	}
	if err := f.proc.Close(); err != nil {
		t.Fatal(err)
	}
	if opts.Gatherer == nil {
		opts.Gatherer = f.reg
	}
	if opts.OpenQuerier == nil {
		opts.OpenQuerier = f.open
	}
	f.srv = httptest.NewServer(web.NewHandler(opts))
	t.Cleanup(f.srv.Close)
	return f
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

// get requests path with optional headers (name, value pairs).
func (f *fixture) get(t *testing.T, path string, header ...string) (*http.Response, []byte) {
	t.Helper()
	return get(t, f.srv.URL+path, header...)
}

func get(t *testing.T, url string, header ...string) (*http.Response, []byte) {
	t.Helper()
	req, err := http.NewRequest(http.MethodGet, url, nil)
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i+1 < len(header); i += 2 {
		req.Header.Set(header[i], header[i+1])
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	var body bytes.Buffer
	if _, err := body.ReadFrom(resp.Body); err != nil {
		t.Fatal(err)
	}
	return resp, body.Bytes()
}
