package dashboard

import (
	"bytes"
	"context"
	"flag"
	"fmt"
	"os"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/state"
)

// demoWorld sizes the demo shop for a test: the budget shift falls in the
// middle of the period and the checkout outage three days before its end.
type demoWorld struct {
	Visitors, Days int
}

// demoConfig is the default configuration with an alert chart that a small
// world can evaluate: 15-minute intervals and at least 5 sessions reaching
// checkout per interval (the defaults, 5 minutes and 30, suit a busy shop).
func demoConfig() config.Config {
	c := config.Default()
	c.Alert.Interval = config.Duration(15 * time.Minute)
	c.Alert.MinSessions = 5
	c.Alert.Baseline = config.Duration(2 * 24 * time.Hour)
	return c
}

// The demo store shared by the handler and browser tests: replayed once
// per test binary, removed by TestMain.
var shared struct {
	once  sync.Once
	dir   string
	st    *state.Store
	open  func() (*query.Querier, error)
	world demoWorld
	err   error
}

// sharedWorld is the world of the shared store: two weeks, about 4 000
// first visits a day (the demo's default rate is about 3 600), so the
// 40-minute checkout outage gives enough sessions per 15-minute interval to
// open an alert. Under -short a lighter world keeps the run quick.
func sharedWorld() demoWorld {
	if testing.Short() {
		return demoWorld{Visitors: 8000, Days: 14}
	}
	return demoWorld{Visitors: 56000, Days: 14}
}

// shopConfig is the demo shop's configuration for the world.
func (w demoWorld) shopConfig() shop.Config {
	sc := shop.DefaultConfig()
	sc.Visitors = w.Visitors
	sc.Days = w.Days
	sc.ShiftDay = w.Days / 2
	sc.IncidentDay = w.Days - 3
	return sc
}

// truth is the world's true incremental conversions per channel, as
// demo --truth writes them (shop.TrueIncremental).
func (w demoWorld) truth() (*query.Truth, error) {
	per, total, err := shop.TrueIncremental(w.shopConfig())
	if err != nil {
		return nil, err
	}
	return &query.Truth{IncrementalTotal: total, Channels: per}, nil
}

// sharedDemo returns a function opening a fresh querier on the shared demo
// store, replaying it on first use.
func sharedDemo(t testing.TB) func() (*query.Querier, error) {
	t.Helper()
	shared.once.Do(func() {
		shared.world = sharedWorld()
		shared.dir, shared.err = os.MkdirTemp("", "dashboard-demo-")
		if shared.err != nil {
			return
		}
		shared.st, shared.open, shared.err = replayDemo(shared.dir, shared.world)
	})
	if shared.err != nil {
		t.Fatal(shared.err)
	}
	return shared.open
}

func TestMain(m *testing.M) {
	flag.Parse()
	code := m.Run()
	if shared.st != nil {
		shared.st.Close()
	}
	if shared.dir != "" {
		os.RemoveAll(shared.dir)
	}
	os.Exit(code)
}

// replayDemo generates the demo world, replays it into a Badger store in
// dir and returns the open store and a function opening a fresh querier on
// it.
func replayDemo(dir string, w demoWorld) (*state.Store, func() (*query.Querier, error), error) {
	sc := w.shopConfig()
	var events bytes.Buffer
	if _, err := shop.Generate(&events, sc); err != nil {
		return nil, nil, err
	}
	c := demoConfig()
	ctx := context.Background()
	st, err := state.Open(ctx, pipeline.StoreOptions(dir, c))
	if err != nil {
		return nil, nil, err
	}
	fail := func(err error) (*state.Store, func() (*query.Querier, error), error) {
		st.Close()
		return nil, nil, err
	}
	rf, err := pipeline.OpenRejectFile(filepath.Join(dir, "rejects.jsonl"))
	if err != nil {
		return fail(err)
	}
	defer rf.Close()
	p, err := pipeline.New(st, pipeline.FromConfig(c), rf, nil)
	if err != nil {
		return fail(err)
	}
	cp, err := pipeline.Replay(ctx, p, "demo", &events, c.Limits.MaxPayload)
	if err != nil {
		p.Close()
		return fail(err)
	}
	if err := p.Close(); err != nil {
		return fail(err)
	}
	if cp.Counts.Accepted == 0 || cp.Counts.RejectedTotal() != 0 {
		return fail(fmt.Errorf("replay counts %+v, want every event accepted", cp.Counts))
	}
	params := query.ParamsFrom(c)
	return st, func() (*query.Querier, error) { return query.NewQuerier(st, params) }, nil
}
