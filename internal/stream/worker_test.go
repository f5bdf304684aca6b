package stream

import (
	"context"
	"errors"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"github.com/touchledger/touchledger/internal/pipeline"
)

// TestDeliveryGapRepositions: a message delivered to someone else (here a
// second fetch on the worker's durable consumer, standing for a delivery
// lost in a reconnect) leaves a gap in the delivery sequence; the worker
// repositions its consumer and still accepts every event exactly once.
func TestDeliveryGapRepositions(t *testing.T) {
	cfg := DefaultConfig()
	cfg.FetchBatch = 50
	b := startBus(t, cfg)
	input := demoInput(t, 400, 2)
	pcfg := processorConfig()
	_, want := replayInto(t, input, pcfg)

	clock := &fakeClock{}
	cfg.Clock = clock.now
	lw := startWorker(t, b, t.TempDir(), pcfg, cfg, cfg.AllPartitions())
	defer lw.stop(t)
	// The consumer exists once the worker has positioned it.
	ctx := context.Background()
	var cons jetstream.Consumer
	for deadline := time.Now().Add(10 * time.Second); ; {
		c, err := b.js.Consumer(ctx, cfg.Stream, ConsumerName(cfg.AllPartitions()))
		if err == nil {
			cons = c
			break
		}
		if time.Now().After(deadline) {
			t.Fatal(err)
		}
		time.Sleep(10 * time.Millisecond)
	}
	lines := strings.SplitAfter(string(input), "\n")
	half := len(lines) / 2
	b.send(t, []byte(strings.Join(lines[:half], "")))
	lw.waitFor(t, 30*time.Second, "the first half", func(s pipeline.Status) bool { return s.Next > uint64(half) })
	// Steal deliveries while the second half flows.
	stolen := 0
	done := make(chan struct{})
	go func() {
		defer close(done)
		for stolen == 0 {
			batch, err := cons.Fetch(5, jetstream.FetchMaxWait(200*time.Millisecond))
			if err != nil {
				return
			}
			for range batch.Messages() {
				stolen++
			}
		}
	}()
	b.send(t, []byte(strings.Join(lines[half:], "")))
	<-done
	last := b.lastSeq(t)
	lw.waitFor(t, 30*time.Second, "every message", func(s pipeline.Status) bool { return s.Next > last })
	clock.advance(time.Hour)
	got := lw.waitFor(t, 30*time.Second, "the buffer to empty", func(s pipeline.Status) bool { return s.Buffered == 0 })
	h := lw.w.Health()
	t.Logf("stole %d deliveries; %d repositions", stolen, h.Repositions)
	if stolen == 0 || h.Repositions == 0 {
		t.Fatalf("stole %d, repositioned %d times: the gap was not exercised", stolen, h.Repositions)
	}
	if got.Counts.Accepted != want.Accepted || got.Counts.Duplicate != want.Duplicate {
		t.Errorf("accepted %d duplicate %d, want %d and %d", got.Counts.Accepted, got.Counts.Duplicate, want.Accepted, want.Duplicate)
	}
}

// TestWatchdogFlagsStall: a consumer that delivers nothing while messages
// are pending (paused on the server here) is flagged stalled after the
// watchdog timeout; once it delivers again the flag clears and every event
// is read.
func TestWatchdogFlagsStall(t *testing.T) {
	cfg := DefaultConfig()
	cfg.FetchWait = 50 * time.Millisecond
	cfg.WatchdogTimeout = 300 * time.Millisecond
	b := startBus(t, cfg)
	lw := startWorker(t, b, t.TempDir(), processorConfig(), cfg, cfg.AllPartitions())
	defer lw.stop(t)
	ctx := context.Background()
	name := ConsumerName(cfg.AllPartitions())
	for deadline := time.Now().Add(10 * time.Second); ; {
		if _, err := b.js.PauseConsumer(ctx, cfg.Stream, name, time.Now().Add(time.Hour)); err == nil {
			break
		} else if time.Now().After(deadline) {
			t.Fatal(err)
		}
		time.Sleep(10 * time.Millisecond)
	}
	input := demoInput(t, 50, 1)
	b.send(t, input)
	last := b.lastSeq(t)
	deadline := time.Now().Add(10 * time.Second)
	for !lw.w.Health().Stalled {
		if time.Now().After(deadline) {
			t.Fatalf("not flagged stalled; health %+v", lw.w.Health())
		}
		time.Sleep(20 * time.Millisecond)
	}
	if h := lw.w.Health(); h.Lag == 0 {
		t.Errorf("stalled with lag 0: %+v", h)
	}
	if _, err := b.js.ResumeConsumer(ctx, cfg.Stream, name); err != nil {
		t.Fatal(err)
	}
	lw.waitFor(t, 10*time.Second, "every message after resuming", func(s pipeline.Status) bool { return s.Next > last })
	for deadline := time.Now().Add(5 * time.Second); lw.w.Health().Stalled; time.Sleep(20 * time.Millisecond) {
		if time.Now().After(deadline) {
			t.Fatal("still flagged stalled after deliveries resumed")
		}
	}
}

// TestTwoWorkersSplitPartitions: two workers owning half of the partitions
// each read disjoint sets of users that together are all the events; every
// message is acknowledged once committed.
func TestTwoWorkersSplitPartitions(t *testing.T) {
	cfg := DefaultConfig()
	b := startBus(t, cfg)
	input := demoInput(t, 600, 2)
	pcfg := processorConfig()
	_, want := replayInto(t, input, pcfg)
	b.send(t, input)
	clock := &fakeClock{}
	cfg.Clock = clock.now
	lo := startWorker(t, b, t.TempDir(), pcfg, cfg, Partitions{0, 7})
	hi := startWorker(t, b, t.TempDir(), pcfg, cfg, Partitions{8, 15})
	ctx := context.Background()
	caughtUp := func(lw *liveWorker) bool {
		lag, err := lw.w.Lag(ctx)
		return err == nil && lag == 0 && lw.p.Status().Next > 0
	}
	for deadline := time.Now().Add(30 * time.Second); !caughtUp(lo) || !caughtUp(hi); time.Sleep(20 * time.Millisecond) {
		if time.Now().After(deadline) {
			t.Fatal("workers did not catch up")
		}
	}
	clock.advance(time.Hour)
	empty := func(s pipeline.Status) bool { return s.Buffered == 0 && s.Commits > 1 }
	a := lo.waitFor(t, 20*time.Second, "low half", empty)
	z := hi.waitFor(t, 20*time.Second, "high half", empty)
	for _, lw := range []*liveWorker{lo, hi} {
		deadline := time.Now().Add(10 * time.Second)
		for {
			c, err := b.js.Consumer(ctx, cfg.Stream, lw.w.Consumer())
			if err != nil {
				t.Fatal(err)
			}
			if c.CachedInfo().NumAckPending == 0 {
				break
			}
			if time.Now().After(deadline) {
				t.Fatalf("%s: %d messages never acknowledged", lw.w.Consumer(), c.CachedInfo().NumAckPending)
			}
			time.Sleep(20 * time.Millisecond)
		}
	}
	lo.stop(t)
	hi.stop(t)
	if a.Counts.Accepted == 0 || z.Counts.Accepted == 0 || a.Counts.Accepted+z.Counts.Accepted != want.Accepted {
		t.Errorf("accepted %d + %d, want both non-zero and %d together", a.Counts.Accepted, z.Counts.Accepted, want.Accepted)
	}
}

// TestRecreatedStreamRefused: a stream deleted and created again restarts
// its sequences below the worker's checkpoint; the worker refuses to run
// rather than skip the new messages as read.
func TestRecreatedStreamRefused(t *testing.T) {
	cfg := DefaultConfig()
	b := startBus(t, cfg)
	b.send(t, demoInput(t, 50, 1))
	last := b.lastSeq(t)
	dir := t.TempDir()
	lw := startWorker(t, b, dir, processorConfig(), cfg, cfg.AllPartitions())
	lw.waitFor(t, 10*time.Second, "every message", func(s pipeline.Status) bool { return s.Next > last })
	lw.stop(t)
	ctx := context.Background()
	if err := b.js.DeleteStream(ctx, cfg.Stream); err != nil {
		t.Fatal(err)
	}
	if err := EnsureStream(ctx, b.js, cfg); err != nil {
		t.Fatal(err)
	}
	lw = startWorker(t, b, dir, processorConfig(), cfg, cfg.AllPartitions())
	select {
	case err := <-lw.done:
		if !errors.Is(err, ErrStreamBehind) {
			t.Errorf("Run = %v, want ErrStreamBehind", err)
		}
	case <-time.After(10 * time.Second):
		t.Error("worker ran on a recreated stream")
		lw.cancel()
		<-lw.done
	}
	lw.p.Close()
	lw.st.Close()
}
