package stream

import (
	"context"
	"sync/atomic"
	"testing"
	"time"

	"github.com/touchledger/touchledger/internal/pipeline"
)

// TestMaintainEvery: the worker's retention schedule runs Maintain (prune
// on Run's goroutine, then reclaim) at every tick, and ends when the
// context ends or Run stops.
func TestMaintainEvery(t *testing.T) {
	cfg := DefaultConfig()
	b := startBus(t, cfg)
	lw := startWorker(t, b, t.TempDir(), processorConfig(), cfg, Partitions{First: 0, Last: cfg.Partitions - 1})
	b.send(t, demoInput(t, 50, 1))
	last := b.lastSeq(t)
	lw.waitFor(t, 30*time.Second, "the input read", func(s pipeline.Status) bool { return s.Next > last })

	var reclaims atomic.Int32
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() {
		lw.w.MaintainEvery(ctx, 20*time.Millisecond, func() error { reclaims.Add(1); return nil })
		close(done)
	}()
	deadline := time.Now().Add(10 * time.Second)
	for reclaims.Load() < 3 {
		if time.Now().After(deadline) {
			t.Fatalf("%d maintenance runs in 10 s, want 3 at a 20 ms interval", reclaims.Load())
		}
		time.Sleep(10 * time.Millisecond)
	}
	cancel()
	select {
	case <-done:
	case <-time.After(5 * time.Second):
		t.Fatal("MaintainEvery did not return after its context ended")
	}

	// A schedule outliving its worker ends with it.
	done = make(chan struct{})
	go func() {
		lw.w.MaintainEvery(context.Background(), time.Hour, nil)
		close(done)
	}()
	lw.stop(t)
	select {
	case <-done:
	case <-time.After(5 * time.Second):
		t.Fatal("MaintainEvery did not return after Run stopped")
	}
}
