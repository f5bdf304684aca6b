package stream

import (
	"bytes"
	"sync/atomic"
	"testing"
	"time"

	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/state"
)

// TestWorkerPausesOnLowDisk (issue 9 item 4): below the free-space reserve
// the worker stops fetching (Health says why) instead of writing until
// Badger's memory-mapped writes hit a full disk (SIGBUS on the old code);
// when space returns it goes on, and every event is counted once.
func TestWorkerPausesOnLowDisk(t *testing.T) {
	cfg := DefaultConfig()
	b := startBus(t, cfg)
	var free atomic.Uint64
	free.Store(10 << 20) // 10 MiB free: below the 100 MiB reserve
	guard := &state.DiskGuard{MinFree: 100 << 20, Stat: func(string) (uint64, uint64, error) { return free.Load(), 1 << 40, nil }}
	input := demoInput(t, 300, 2)
	b.send(t, input)
	w, err := NewWorker(b.js, cfg, cfg.AllPartitions(), nil)
	if err != nil {
		t.Fatal(err)
	}
	w.SetDiskGuard(guard)
	lw := runWorker(t, w, t.TempDir(), processorConfig())
	time.Sleep(1500 * time.Millisecond)
	if h := w.Health(); !h.DiskLow {
		t.Errorf("health %+v: want disk low", h)
	}
	if s := lw.p.Status(); s.Next > 0 || s.Counts.Accepted > 0 {
		t.Errorf("worker consumed while the disk was low: %+v", s)
	}
	free.Store(1 << 30)
	lines := uint64(bytes.Count(input, []byte("\n")))
	lw.waitFor(t, 20*time.Second, "every message", func(s pipeline.Status) bool { return s.Next > lines })
	if h := w.Health(); h.DiskLow {
		t.Errorf("health %+v: still disk low", h)
	}
	lw.stop(t)
}
