package stream

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"sort"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/state"
)

// Worker consumes a range of partitions into one pipeline.Processor.
//
// Wiring: NewWorker, then build the processor with w.ProcessorConfig(...)
// (it turns on PersistPending and acknowledges on commit) and
// w.DeadLetters() as its RejectSink, then Run.
//
// Positions are stream sequences: one durable pull consumer (ConsumerName)
// filters the range's partition subjects with AckPolicy All, so its
// deliveries are in stream order and the worker is one pipeline source
// (Config.SourceName). At start the consumer is repositioned to the
// committed checkpoint (ResetConsumerToSequence; on servers without it, the
// consumer is created again from that sequence): everything before it was
// applied, everything from it is delivered again, in order, whatever was
// acknowledged. During the run the delivery sequence must grow by one per
// message; a gap (a delivery lost in a reconnect) repositions the consumer
// to the first sequence not yet forwarded. Messages delivered again below
// that are skipped.
//
// Acknowledgement follows each commit (OnCommit): the worker keeps the
// reply subject of every message forwarded since the last acknowledgement
// (a stream sequence and a string each, at most one commit's worth plus the
// in-flight bound) and acknowledges the one at the checkpoint's Next−1;
// with AckPolicy All that covers every message below it.
type Worker struct {
	js     jetstream.JetStream
	cfg    Config
	parts  Partitions
	log    *slog.Logger
	dead   *DeadLetters
	name   string
	source string

	ackMu   sync.Mutex
	unacked []delivery // forwarded, not yet acknowledged; stream sequence ascending
	uhead   int

	committed    atomic.Uint64 // committed checkpoint's Next
	acked        atomic.Uint64 // highest stream sequence acknowledged
	lag          atomic.Uint64 // messages not yet delivered, as last reported
	lastDelivery atomic.Int64  // Unix ns of the last delivery
	stalled      atomic.Bool
	diskLow      atomic.Bool
	disk         *state.DiskGuard
	repositions  atomic.Int64
	started      atomic.Bool

	// Requests for the processor from other goroutines (erasure): Run
	// executes them on its own goroutine, between two chunks of input.
	cmds    chan *command
	stopped chan struct{} // closed when Run returns
}

// command is a function Run executes with the processor on its goroutine.
type command struct {
	fn   func(ctx context.Context, p *pipeline.Processor) error
	err  error
	done chan struct{}
}

type delivery struct {
	seq   uint64
	reply string
}

// NewWorker returns a worker for partitions parts of the stream cfg names.
func NewWorker(js jetstream.JetStream, cfg Config, parts Partitions, log *slog.Logger) (*Worker, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	if err := parts.Check(cfg.Partitions); err != nil {
		return nil, fmt.Errorf("stream: %w", err)
	}
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	w := &Worker{
		js: js, cfg: cfg, parts: parts,
		log:     log.With("consumer", ConsumerName(parts)),
		dead:    NewDeadLetters(js, cfg),
		name:    ConsumerName(parts),
		source:  cfg.SourceName(parts),
		cmds:    make(chan *command),
		stopped: make(chan struct{}),
	}
	return w, nil
}

// Source returns the pipeline source name of the worker.
func (w *Worker) Source() string { return w.source }

// Consumer returns the name of the worker's durable consumer.
func (w *Worker) Consumer() string { return w.name }

// Partitions returns the partition range the worker owns.
func (w *Worker) Partitions() Partitions { return w.parts }

// DeadLetters returns the sink to pass to pipeline.New.
func (w *Worker) DeadLetters() *DeadLetters { return w.dead }

// ProcessorConfig returns c with what live input needs: PersistPending (a
// restart finds buffered events in the store, since acknowledged messages
// are not delivered again) and an OnCommit that acknowledges the committed
// messages before calling c's own OnCommit, if any.
func (w *Worker) ProcessorConfig(c pipeline.Config) pipeline.Config {
	c.PersistPending = true
	prev := c.OnCommit
	c.OnCommit = func(source string, cp pipeline.Checkpoint) {
		if source == w.source {
			w.committed.Store(cp.Next)
			if cp.Next > 0 {
				w.ackUpTo(cp.Next - 1)
			}
		}
		if prev != nil {
			prev(source, cp)
		}
	}
	return c
}

// Health is the consumer's state for health checks and metrics.
type Health struct {
	Lag          uint64    // messages matching the filter not yet delivered, as last reported by the server
	LastDelivery time.Time // zero before the first delivery
	Stalled      bool      // no delivery for WatchdogTimeout although messages are pending
	DiskLow      bool      // not fetching: free disk space below the reserve
	Repositions  int64     // consumer repositionings after a delivery gap or stall
	Committed    uint64    // committed checkpoint: every stream sequence below is applied
	Acked        uint64    // highest stream sequence acknowledged
}

// Health returns the consumer's state (safe for concurrent use).
func (w *Worker) Health() Health {
	h := Health{
		Lag:         w.lag.Load(),
		Stalled:     w.stalled.Load(),
		DiskLow:     w.diskLow.Load(),
		Repositions: w.repositions.Load(),
		Committed:   w.committed.Load(),
		Acked:       w.acked.Load(),
	}
	if t := w.lastDelivery.Load(); t != 0 {
		h.LastDelivery = time.Unix(0, t)
	}
	return h
}

// Lag asks the server how many messages matching the worker's partitions
// are not yet delivered to its consumer (metrics' consumer lag).
func (w *Worker) Lag(ctx context.Context) (uint64, error) {
	c, err := w.js.Consumer(ctx, w.cfg.Stream, w.name)
	if err != nil {
		return 0, fmt.Errorf("consumer %s: %w", w.name, err)
	}
	n := c.CachedInfo().NumPending
	w.lag.Store(n)
	return n, nil
}

// tickClock is the clock handed to Processor.Tick: the wall clock (or
// Config.Clock) less QuietAfter. Tick raises event time by the wall time
// since the last arrival, capped at the clock it is given; the lag means
// only a silence longer than QuietAfter moves event time.
func (w *Worker) tickClock() time.Time {
	now := time.Now()
	if w.cfg.Clock != nil {
		now = w.cfg.Clock()
	}
	return now.Add(-w.cfg.QuietAfter)
}

// ErrWorkerStarted is returned by a second Run of the same Worker.
var ErrWorkerStarted = errors.New("stream: worker already started")

// Run consumes until ctx is cancelled or the processor fails. It begins the
// source (resuming from its checkpoint), repositions the consumer, and
// offers every new message in stream order; every TickInterval it calls
// p.Tick so a quiet partition still releases buffered events and commits on
// time. Between two chunks it runs the commands other goroutines hand it
// (Forget). Reaching the stream and positioning the consumer at start are
// retried for up to StartRetry (a cluster electing its leaders). On
// cancellation it stops fetching, lets event time catch up with
// the wall clock once more and commits with Finish(ctx, false) — buffered
// events stay buffered (persisted), nothing is drained — then returns nil.
// The caller closes p afterwards.
func (w *Worker) Run(ctx context.Context, p *pipeline.Processor) error {
	if !w.started.CompareAndSwap(false, true) {
		return ErrWorkerStarted
	}
	defer close(w.stopped)
	cp, err := p.Begin(w.source)
	if err != nil {
		return err
	}
	w.committed.Store(cp.Next)
	// The processor's Status is set by commits: one now makes it report the
	// checkpoint (counts, buffered events) before any new input arrives.
	if err := p.Finish(context.WithoutCancel(ctx), false); err != nil {
		return err
	}
	start := max(cp.Next, 1)
	cons, err := w.begin(ctx, start)
	if err != nil {
		return err
	}
	w.log.Info("consuming", "stream", w.cfg.Stream, "partitions", w.parts.String(), "from", start)
	w.lastDelivery.Store(time.Now().UnixNano())

	const chunkSize = 256
	nchunks := max(2, w.cfg.InFlight/chunkSize)
	f := &fetcher{
		w: w, cons: cons, next: start, dec: p.NewDecoder(),
		out:  make(chan *pipeline.Chunk, nchunks),
		pool: pipeline.NewChunkPool(nchunks + 1),
		size: chunkSize,
	}
	fetchCtx, stopFetch := context.WithCancel(ctx)
	defer stopFetch()
	go f.run(fetchCtx)

	// The processor's calls never see ctx's cancellation: a commit
	// started before it must not fail because of it.
	pctx := context.WithoutCancel(ctx)
	tick := time.NewTicker(w.cfg.TickInterval)
	defer tick.Stop()
	next := cp.Next
	var runErr error
loop:
	for {
		select {
		case <-ctx.Done():
			break loop
		case c, ok := <-f.Chunks():
			if !ok {
				runErr = f.Err()
				break loop
			}
			var err error
			next, err = p.OfferChunk(pctx, c, next)
			f.Release(c)
			if err != nil {
				runErr = err
				break loop
			}
		case <-tick.C:
			if err := p.Tick(pctx, w.tickClock()); err != nil {
				runErr = err
				break loop
			}
		case c := <-w.cmds:
			c.err = c.fn(pctx, p)
			close(c.done)
			if c.err != nil {
				// The processor failed (its store could not be read or
				// written): stop as a failed Offer would.
				runErr = c.err
				break loop
			}
		}
	}
	stopFetch()
	for c := range f.Chunks() { // until the fetcher has stopped
		f.Release(c)
	}
	if runErr != nil {
		return runErr
	}
	if err := p.Tick(pctx, w.tickClock()); err != nil {
		return err
	}
	if err := p.Finish(pctx, false); err != nil {
		return err
	}
	st := p.Status()
	w.log.Info("stopped", "next", st.Next, "accepted", st.Counts.Accepted, "buffered", st.Buffered)
	return nil
}

// Maintain drops counter buckets past their retention (Processor.Prune)
// on Run's goroutine, so no commit runs at the same time, and then lets the
// store reclaim the space. Call it on a schedule (the ingest command does,
// every --maintenance interval).
func (w *Worker) Maintain(ctx context.Context, reclaim func() error) (state.PruneReport, error) {
	var rep state.PruneReport
	err := w.do(ctx, func(ctx context.Context, p *pipeline.Processor) error {
		var err error
		rep, err = p.Prune(ctx)
		return err
	})
	if err != nil || reclaim == nil {
		return rep, err
	}
	return rep, reclaim()
}

// MaintainEvery runs Maintain every interval until ctx ends or Run stops
// (the live worker's retention schedule; interval <= 0 returns at once).
// Failures are logged and retried at the next tick.
func (w *Worker) MaintainEvery(ctx context.Context, interval time.Duration, reclaim func() error) {
	if interval <= 0 {
		return
	}
	t := time.NewTicker(interval)
	defer t.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-w.stopped:
			return
		case <-t.C:
			rep, err := w.Maintain(ctx, reclaim)
			if err != nil {
				w.log.Warn("maintenance", "error", err)
				continue
			}
			w.log.Info("maintenance", "buckets_dropped", rep.Buckets)
		}
	}
}

// ErrWorkerStopped is returned by Forget when Run has ended.
var ErrWorkerStopped = errors.New("stream: the worker has stopped")

// do runs fn with the processor on Run's goroutine, between two chunks of
// input, and returns its error. It waits for Run to start; it fails with
// ErrWorkerStopped once Run has returned, or with ctx's error. An error
// from fn also ends Run (the processor is not usable after a failed read
// or commit of its store).
func (w *Worker) do(ctx context.Context, fn func(ctx context.Context, p *pipeline.Processor) error) error {
	c := &command{fn: fn, done: make(chan struct{})}
	select {
	case w.cmds <- c:
	case <-w.stopped:
		return ErrWorkerStopped
	case <-ctx.Done():
		return fmt.Errorf("stream: %w", ctx.Err())
	}
	<-c.done // Run executes a received command at once
	return c.err
}

// Forget erases a person on the running worker: Processor.Forget on Run's
// goroutine (the processor is not safe for concurrent use), committed
// before it returns. id is the raw user id; the processor pseudonymises it
// like input when a key is configured. Purging the person's messages from
// the stream is Purge's job (ServeAdmin does both).
func (w *Worker) Forget(ctx context.Context, id string) (pipeline.ForgetReport, error) {
	var rep pipeline.ForgetReport
	err := w.do(ctx, func(ctx context.Context, p *pipeline.Processor) error {
		var err error
		rep, err = p.Forget(ctx, id)
		return err
	})
	return rep, err
}

// StartRetry bounds how long Run retries reaching the stream and
// positioning its consumer at start: a cluster that is electing its
// leaders answers API requests with timeouts or "not available" for a
// while (seconds, typically).
const StartRetry = 2 * time.Minute

// begin checks the stream and positions the consumer at start, retrying
// failures other than ErrStreamBehind for up to StartRetry.
func (w *Worker) begin(ctx context.Context, start uint64) (jetstream.Consumer, error) {
	deadline := time.Now().Add(StartRetry)
	backoff := 200 * time.Millisecond
	for {
		err := w.checkStream(ctx, start)
		if err == nil {
			var cons jetstream.Consumer
			if cons, err = w.position(ctx, start); err == nil {
				return cons, nil
			}
		}
		if errors.Is(err, ErrStreamBehind) || ctx.Err() != nil || time.Now().After(deadline) {
			return nil, err
		}
		w.log.Warn("reaching the stream; retrying", "err", err, "in", backoff)
		sleep(ctx, backoff)
		backoff = min(2*backoff, 5*time.Second)
	}
}

// ErrStreamBehind is returned by Run when the stream ends before the
// committed checkpoint: the stream was deleted and created again (its
// sequences restarted), so its new messages would be skipped as read.
var ErrStreamBehind = errors.New("stream: the stream ends before the committed checkpoint")

// checkStream compares the stream with the checkpoint start: a stream that
// ends before it was recreated (an error: its positions mean other
// messages now); one whose first message is after it lost messages to its
// age limit while the worker was away (logged: they cannot be read again).
func (w *Worker) checkStream(ctx context.Context, start uint64) error {
	s, err := w.js.Stream(ctx, w.cfg.Stream)
	if err != nil {
		return fmt.Errorf("stream %s: %w", w.cfg.Stream, err)
	}
	st := s.CachedInfo().State
	if st.LastSeq+1 < start {
		return fmt.Errorf("%w: %s ends at sequence %d, the data directory has read up to %d (was the stream recreated? start a new data directory)",
			ErrStreamBehind, w.cfg.Stream, st.LastSeq, start-1)
	}
	if st.Msgs > 0 && st.FirstSeq > start {
		w.log.Error("messages expired from the stream before they were read", "from", start, "to", st.FirstSeq-1,
			"max_age", w.cfg.MaxAge)
	}
	return nil
}

// consumerConfig is the durable consumer of the worker's partitions. A
// worker owning every partition filters the whole stream with one subject
// (the server's single-filter path is cheaper than matching 16 filters).
func (w *Worker) consumerConfig() jetstream.ConsumerConfig {
	cc := jetstream.ConsumerConfig{
		Durable:       w.name,
		Description:   "touchledger worker for partitions " + w.parts.String(),
		DeliverPolicy: jetstream.DeliverAllPolicy,
		AckPolicy:     jetstream.AckAllPolicy,
		AckWait:       w.cfg.AckWait,
		MaxAckPending: w.cfg.MaxAckPending,
		ReplayPolicy:  jetstream.ReplayInstantPolicy,
	}
	if w.parts == w.cfg.AllPartitions() {
		cc.FilterSubject = w.cfg.EventSubjects()
	} else {
		cc.FilterSubjects = w.cfg.Filters(w.parts)
	}
	return cc
}

// position makes the next delivery of the durable consumer the first
// message at or after stream sequence seq, discarding the delivery state
// (pending acknowledgements, redeliveries). The stream keeps its messages
// (limits retention), so this never loses one.
func (w *Worker) position(ctx context.Context, seq uint64) (jetstream.Consumer, error) {
	cc := w.consumerConfig()
	cons, err := w.js.CreateOrUpdateConsumer(ctx, w.cfg.Stream, cc)
	if err == nil {
		if _, err = w.js.ResetConsumerToSequence(ctx, w.cfg.Stream, w.name, seq); err == nil {
			return cons, nil
		}
	}
	if ctx.Err() != nil || errors.Is(err, context.DeadlineExceeded) || errors.Is(err, nats.ErrTimeout) {
		// Unanswered (a cluster electing a leader): the caller retries.
		return nil, fmt.Errorf("position consumer %s: %w", w.name, err)
	}
	// The server refused: older servers have no consumer reset, and a
	// consumer created by this path starts at a fixed sequence (which an
	// update to DeliverAll, or a reset below it, is refused for): create it
	// again from seq.
	w.log.Info("re-creating the consumer to reposition it", "seq", seq, "reason", err)
	if err := w.js.DeleteConsumer(ctx, w.cfg.Stream, w.name); err != nil && !errors.Is(err, jetstream.ErrConsumerNotFound) {
		return nil, fmt.Errorf("position consumer %s: delete: %w", w.name, err)
	}
	if seq > 1 {
		cc.DeliverPolicy = jetstream.DeliverByStartSequencePolicy
		cc.OptStartSeq = seq
	}
	cons, err = w.js.CreateConsumer(ctx, w.cfg.Stream, cc)
	if err != nil {
		return nil, fmt.Errorf("position consumer %s: %w", w.name, err)
	}
	return cons, nil
}

// register records the reply subjects of forwarded messages.
func (w *Worker) register(ds []delivery) {
	w.ackMu.Lock()
	w.unacked = append(w.unacked, ds...)
	w.ackMu.Unlock()
}

// ackUpTo acknowledges the forwarded message with the largest stream
// sequence ≤ seq (AckPolicy All: everything below it too). Called from the
// commit goroutine.
func (w *Worker) ackUpTo(seq uint64) {
	w.ackMu.Lock()
	live := w.unacked[w.uhead:]
	i := sort.Search(len(live), func(i int) bool { return live[i].seq > seq }) - 1
	if i < 0 {
		w.ackMu.Unlock()
		return
	}
	d := live[i]
	clear(live[:i+1])
	w.uhead += i + 1
	if w.uhead == len(w.unacked) {
		w.unacked, w.uhead = w.unacked[:0], 0
	} else if w.uhead > 4096 && w.uhead*2 > len(w.unacked) {
		n := copy(w.unacked, w.unacked[w.uhead:])
		w.unacked, w.uhead = w.unacked[:n], 0
	}
	w.ackMu.Unlock()
	if err := w.js.Conn().Publish(d.reply, ackBody); err != nil {
		// Harmless for correctness: the message is delivered again and
		// skipped, and the next commit acknowledges past it.
		w.log.Warn("acknowledge", "seq", d.seq, "err", err)
		return
	}
	w.acked.Store(d.seq)
}

// ackBody is JetStream's positive acknowledgement.
var ackBody = []byte("+ACK")

// chunk carries fetched, decoded messages to the processing goroutine.
var _ pipeline.InputSource = (*fetcher)(nil)

// Chunks, Err and Release make the fetcher a pipeline.InputSource.
func (f *fetcher) Chunks() <-chan *pipeline.Chunk { return f.out }
func (f *fetcher) Err() error                     { return f.err }
func (f *fetcher) Release(c *pipeline.Chunk)      { f.pool.Put(c) }

// diskPoll is how often a worker paused by a low disk looks again.
const diskPoll = time.Second

// SetDiskGuard makes the worker stop fetching while g reports the disk
// low (state.DiskGuard), and resume when space returns. Call before Run.
func (w *Worker) SetDiskGuard(g *state.DiskGuard) { w.disk = g }

// fetcher pulls batches, checks delivery order, decodes and forwards: the
// pipeline.InputSource of a live worker.
type fetcher struct {
	w       *Worker
	cons    jetstream.Consumer
	next    uint64 // first stream sequence not yet forwarded
	dseq    uint64 // last delivery sequence seen since the consumer was positioned
	dec     *event.Decoder
	out     chan *pipeline.Chunk
	pool    *pipeline.ChunkPool
	replies []delivery // of the chunk being filled
	size    int
	err     error // why run ended early (set before out is closed)

	lastInfo   time.Time
	lastErrLog time.Time
	failing    time.Time // first of consecutive fetch failures
}

// run fetches until ctx ends or a fatal error, then closes out.
func (f *fetcher) run(ctx context.Context) {
	defer close(f.out)
	backoff := 50 * time.Millisecond
	for ctx.Err() == nil {
		if f.w.disk != nil {
			// Full disks are a state: stop fetching below the reserve (what
			// was read is committed as usual), go on when space returns.
			if _, err := f.w.disk.Check(); err != nil {
				if !f.w.diskLow.Swap(true) {
					f.w.log.Error("disk space low: not fetching until space returns", "err", err)
				}
				sleep(ctx, diskPoll)
				continue
			}
			if f.w.diskLow.Swap(false) {
				f.w.log.Info("disk space back: fetching again")
			}
		}
		batch, err := f.cons.Fetch(f.w.cfg.FetchBatch, jetstream.FetchMaxWait(f.w.cfg.FetchWait))
		var n int
		var gap bool
		if err == nil {
			n, gap = f.forward(ctx, batch)
			err = batch.Error()
		}
		if ctx.Err() != nil {
			return
		}
		if err != nil && !errors.Is(err, nats.ErrTimeout) && !errors.Is(err, jetstream.ErrNoMessages) {
			if fatal := f.trouble(ctx, err); fatal != nil {
				f.err = fatal
				return
			}
			sleep(ctx, backoff)
			backoff = min(2*backoff, 2*time.Second)
			continue
		}
		backoff = 50 * time.Millisecond
		f.failing = time.Time{}
		if gap {
			f.w.log.Warn("delivery gap: repositioning the consumer", "next", f.next)
			if err := f.reposition(ctx); err != nil && ctx.Err() == nil {
				if fatal := f.trouble(ctx, err); fatal != nil {
					f.err = fatal
					return
				}
			}
			continue
		}
		if n > 0 {
			if f.w.stalled.Swap(false) {
				f.w.log.Info("consumer delivers again")
			}
			continue
		}
		f.watch(ctx)
	}
}

// forward passes a batch on in chunks; after a delivery gap it reads the
// rest of the batch without forwarding it.
func (f *fetcher) forward(ctx context.Context, batch jetstream.MessageBatch) (n int, gap bool) {
	msgs := batch.Messages()
	var c *pipeline.Chunk
	var skipped jetstream.Msg
	stopped := false
	send := func() {
		if c == nil || len(c.Inputs) == 0 {
			return
		}
		f.w.register(f.replies)
		f.replies = f.replies[:0]
		select {
		case f.out <- c:
			c = nil
		case <-ctx.Done():
			stopped = true
		}
	}
	for msg := range msgs {
		if gap || stopped {
			continue
		}
		meta, err := msg.Metadata()
		if err != nil {
			gap = true
			continue
		}
		now := time.Now().UnixNano()
		f.w.lastDelivery.Store(now)
		f.w.lag.Store(meta.NumPending)
		if meta.Sequence.Consumer != f.dseq+1 {
			gap = true
			continue
		}
		f.dseq = meta.Sequence.Consumer
		seq := meta.Sequence.Stream
		if seq < f.next {
			// Delivered again: forwarded before. Acknowledge it at once if
			// it is committed; otherwise the next commit covers it.
			if seq < f.w.committed.Load() {
				skipped = msg
			}
			continue
		}
		if c == nil {
			var ok bool
			if c, ok = f.pool.Get(ctx); !ok {
				stopped = true
				continue
			}
		}
		f.next = seq + 1
		data := msg.Data()
		ev, derr := f.dec.Decode(data)
		if derr == nil {
			derr = f.w.cfg.CheckSubject(msg.Subject(), &ev)
		}
		c.Add(pipeline.Input{Origin: pipeline.Origin{Pos: seq, Subject: msg.Subject()}, Payload: data, Event: ev, Err: derr})
		f.replies = append(f.replies, delivery{seq: seq, reply: msg.Reply()})
		n++
		if len(c.Inputs) >= f.size || len(msgs) == 0 {
			send()
		}
	}
	if !stopped {
		send()
	}
	if c != nil { // not sent: ctx ended
		f.replies = f.replies[:0]
		f.pool.Put(c)
	}
	if skipped != nil {
		if err := skipped.Ack(); err != nil {
			f.w.log.Warn("acknowledge a message delivered again", "err", err)
		}
	}
	return n, gap
}

// reposition restarts delivery at the first sequence not yet forwarded.
func (f *fetcher) reposition(ctx context.Context) error {
	cons, err := f.w.position(ctx, f.next)
	if err != nil {
		return err
	}
	f.cons, f.dseq = cons, 0
	f.w.repositions.Add(1)
	return nil
}

// watch runs after an empty fetch: when nothing was delivered for the
// watchdog timeout although the server reports pending messages, the
// consumer is flagged stalled, logged and repositioned.
func (f *fetcher) watch(ctx context.Context) {
	timeout := f.w.cfg.WatchdogTimeout
	idle := time.Since(time.Unix(0, f.w.lastDelivery.Load()))
	if idle < timeout || time.Since(f.lastInfo) < timeout/4 {
		return
	}
	f.lastInfo = time.Now()
	ictx, cancel := context.WithTimeout(ctx, f.w.cfg.FetchWait+2*time.Second)
	info, err := f.cons.Info(ictx)
	cancel()
	if err != nil {
		if ctx.Err() == nil && !f.w.stalled.Swap(true) {
			f.w.log.Warn("watchdog: no delivery and no consumer info", "idle", idle.Round(time.Second), "err", err)
		}
		return
	}
	f.w.lag.Store(info.NumPending)
	if info.NumPending == 0 {
		return
	}
	if !f.w.stalled.Swap(true) {
		f.w.log.Warn("watchdog: consumer stopped delivering", "idle", idle.Round(time.Second),
			"pending", info.NumPending, "ack_pending", info.NumAckPending)
	}
	if err := f.reposition(ctx); err != nil && ctx.Err() == nil {
		f.w.log.Warn("watchdog: reposition failed", "err", err)
	}
}

// trouble handles a failed fetch: a deleted consumer is created again, a
// closed connection ends the worker, anything else is logged (at most
// every 30 s) and retried; failures lasting the watchdog timeout flag the
// worker stalled.
func (f *fetcher) trouble(ctx context.Context, err error) error {
	if errors.Is(err, nats.ErrConnectionClosed) || f.w.js.Conn().IsClosed() {
		return fmt.Errorf("stream: fetch: %w", err)
	}
	now := time.Now()
	if f.failing.IsZero() {
		f.failing = now
	} else if now.Sub(f.failing) >= f.w.cfg.WatchdogTimeout && !f.w.stalled.Swap(true) {
		f.w.log.Warn("watchdog: fetches keep failing", "for", now.Sub(f.failing).Round(time.Second), "err", err)
	}
	if now.Sub(f.lastErrLog) >= 30*time.Second {
		f.lastErrLog = now
		f.w.log.Warn("fetch failed; retrying", "err", err)
	}
	if errors.Is(err, jetstream.ErrConsumerDeleted) || errors.Is(err, jetstream.ErrConsumerNotFound) {
		if rerr := f.reposition(ctx); rerr != nil && ctx.Err() == nil {
			f.w.log.Warn("re-create consumer", "err", rerr)
		}
	}
	return nil
}

func sleep(ctx context.Context, d time.Duration) {
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
	case <-ctx.Done():
	}
}
