package pipeline

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"sort"
	"sync"
	"time"

	"github.com/cespare/xxhash/v2"
	"github.com/dgraph-io/ristretto/v2/z"

	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/privacy"
	"github.com/touchledger/touchledger/internal/sessionize"
	"github.com/touchledger/touchledger/internal/state"
	"github.com/touchledger/touchledger/internal/tally"
)

// RejectSink keeps inputs that were not accepted, with their reason.
type RejectSink interface {
	// Reset discards everything recorded after mark (a value Sync returned
	// earlier and that was committed); 0 means from the start.
	Reset(mark int64) error
	// Reject records one input, named by its origin.
	Reject(o Origin, reason event.Reason, msg string, payload []byte) error
	// Sync makes every record durable and returns a mark for Reset.
	Sync() (mark int64, err error)
}

// Origin says where an input came from: its position (a replay file's
// line number, a stream sequence) and, for live input, the subject it was
// published on. Each input carries it to the reject sink.
type Origin struct {
	Pos     uint64
	Subject string // "" for replay input
}

// Config configures a Processor.
type Config struct {
	Tracker        sessionize.Params
	Lateness       time.Duration
	Currency       string
	Limits         event.Limits
	CacheUsers     int           // user states kept in memory (bounded; at most ~2× between commits)
	CommitEvents   int           // commit after this many inputs
	CommitInterval time.Duration // or after this much wall time, whichever comes first

	// PersistPending stores the payloads of events waiting in the reorder
	// buffer with each commit, so a restart finds them in the store instead
	// of reading them again from the input (live input, whose positions
	// before the acknowledged one cannot be read again). Replay from a file
	// leaves it off: it re-reads the buffered lines by position.
	PersistPending bool
	// Pseudonyms, if set, replaces every user id by its keyed pseudonym
	// right after decoding, before the id is used anywhere; rejected
	// payloads are then kept only as length and hash (privacy.Redact), and
	// buffered events are persisted re-encoded with the pseudonym.
	Pseudonyms *privacy.Pseudonymizer
	// Now, if set, is the wall clock of live input: events more than
	// MaxFuture ahead of it are rejected as future. Replay leaves it nil
	// and guards event time with MaxJump instead (see clock.go). It is
	// also the processor's clock for commit intervals, arrival times and
	// erasure windows (time.Now when nil).
	Now       func() time.Time
	MaxFuture time.Duration // 0 disables
	MaxJump   time.Duration // 0 disables
	// Disk, if set, stops a replay below the free-space reserve (Replay).
	// Live input pauses fetching instead (stream.Worker.SetDiskGuard).
	Disk *state.DiskGuard
	// OnCommit, if set, is called after each successful commit with the
	// committed checkpoint, on the committing goroutine. Live input
	// acknowledges its messages here.
	OnCommit func(source string, cp Checkpoint)
}

// Validate checks the configuration.
func (c Config) Validate() error {
	if err := c.Tracker.Validate(); err != nil {
		return err
	}
	switch {
	case c.Lateness < 0:
		return errors.New("lateness must not be negative")
	case c.MaxFuture < 0 || c.MaxJump < 0:
		return errors.New("max future and max jump must not be negative")
	case c.CacheUsers <= 0:
		return errors.New("user cache size must be positive")
	case c.CommitEvents <= 0:
		return errors.New("commit size must be positive")
	case c.CommitInterval <= 0:
		return errors.New("commit interval must be positive")
	}
	return nil
}

type cached struct {
	u     sessionize.UserState
	dirty bool
}

// Processor turns input payloads into committed state: decode and validate,
// reorder by event time, de-duplicate, apply to user state, and commit
// counters, user states and the input position together. Not safe for
// concurrent use; one Processor per store.
type Processor struct {
	cfg     Config
	store   *state.Store
	log     *slog.Logger
	rejects RejectSink

	dec     *event.Decoder
	tracker *sessionize.Tracker
	reorder *sessionize.Reorder
	batch   *tally.Batch

	cur, prev map[string]*cached
	reader    *state.Reader
	known     *z.Bloom // hashes of user ids that may be stored; a miss means a new user, no store read

	source      string
	ckpt        Checkpoint
	sinceCommit int
	lastCommit  time.Time
	inflight    chan error
	maxBytes    int64 // commit size budget (a share of Badger's transaction limit)
	maxEntries  int64
	ndirty      int
	dirtyBytes  int64 // estimated stored size of the dirty users
	stats       Stats

	// PersistPending bookkeeping since the last commit.
	pendingNew map[uint64][]byte // pushed, not yet persisted
	released   []uint64          // persisted earlier and applied since
	persisted  map[uint64]bool   // positions persisted and still buffered

	lastArrival time.Time // wall time of the last Offer (for Tick)
	lastEvent   int64     // largest event time seen at that moment

	mu     sync.Mutex // guards status
	status Status

	held []heldEvent // set aside by the clock guard, in position order (clock.go)

	forgotten map[string]int64 // state.ForgetKey(user) → Unix ns (wall) until which their events are dropped
	erase     map[string]int64 // erased since the last commit (user → until)
}

// Status is the processor's committed progress, safe to read from any
// goroutine (metrics, health checks).
type Status struct {
	Source      string
	Counts      Counts        // as of the last commit
	Next        uint64        // every position below was read, as of the last commit
	Watermark   time.Time     // as of the last commit
	LatestEvent time.Time     // largest event time seen, as of the last commit
	Commits     int           // commits completed
	LastCommit  time.Time     // wall time of the last completed commit
	CommitTook  time.Duration // duration of the last commit
	Buffered    int           // events waiting in the reorder buffer at the last commit
}

// Status returns the committed progress (safe for concurrent use).
func (p *Processor) Status() Status {
	p.mu.Lock()
	defer p.mu.Unlock()
	s := p.status
	s.Counts = s.Counts.clone()
	return s
}

// pruneLimit bounds the buckets one Prune drops (Badger's DropPrefix takes
// a few milliseconds per bucket and blocks writes meanwhile); the rest go in
// later calls.
const pruneLimit = 256

// knownUsers sizes the filter of stored user ids (about 4.8 MB at a 1 %
// false-positive rate). Beyond it the false-positive rate grows and more
// lookups read the store; answers never change.
const knownUsers = 4_000_000

const minInt64 = -1 << 63

// New returns a processor over an open store.
func New(store *state.Store, cfg Config, rejects RejectSink, log *slog.Logger) (*Processor, error) {
	if err := cfg.Validate(); err != nil {
		return nil, fmt.Errorf("pipeline: %w", err)
	}
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	tr, err := sessionize.NewTracker(cfg.Tracker)
	if err != nil {
		return nil, err
	}
	if err := CheckKey(context.Background(), store, cfg.Pseudonyms); err != nil {
		return nil, err
	}
	res := store.Resolutions()
	p := &Processor{
		cfg: cfg, store: store, log: log, rejects: rejects,
		dec:     event.NewDecoder(cfg.Limits, cfg.Currency),
		tracker: tr,
		reorder: sessionize.NewReorder(int64(cfg.Lateness)),
		batch:   tally.NewBatch(int64(res[0].Step / time.Second)),
		cur:     make(map[string]*cached),
		prev:    make(map[string]*cached),
		reader:  store.NewReader(),

		pendingNew: make(map[uint64][]byte),
		persisted:  make(map[uint64]bool),
		known:      z.NewBloomFilter(float64(knownUsers), 0.01),
		forgotten:  make(map[string]int64),
		erase:      make(map[string]int64),
	}
	if err := p.reader.Forgotten(func(id string, until int64) error {
		p.forgotten[id] = until
		return nil
	}); err != nil {
		return nil, fmt.Errorf("pipeline: read erasure markers: %w", err)
	}
	if err := p.reader.Users(func(id string) error {
		p.known.Add(xxhash.Sum64String(id))
		return nil
	}); err != nil {
		return nil, fmt.Errorf("pipeline: index stored users: %w", err)
	}
	// Size commits to fit one Badger transaction with a wide margin:
	// a user state is a few hundred bytes; counters are few per commit.
	maxBytes, maxEntries := store.Limits()
	p.maxBytes, p.maxEntries = maxBytes*6/10, maxEntries*6/10
	if maxSeen, floor, ok, err := p.reader.Watermark(); err != nil {
		return nil, err
	} else if ok {
		p.reorder.Restore(maxSeen, floor)
	}
	m, err := p.reader.RejectsLen()
	if err != nil {
		return nil, err
	}
	if rejects != nil {
		if err := rejects.Reset(m); err != nil {
			return nil, fmt.Errorf("pipeline: reset rejects to committed mark: %w", err)
		}
	}
	return p, nil
}

// ErrInterrupted is returned by Begin when another source was interrupted
// with events still buffered.
var ErrInterrupted = errors.New("pipeline: another input was interrupted with events still buffered")

// Begin starts (or resumes) reading a source and returns its committed
// checkpoint. Positions below cp.Next were read before: the caller skips them,
// except those in cp.Pending, which it passes to Readmit; then it passes
// every later position to Offer.
func (p *Processor) Begin(source string) (Checkpoint, error) {
	open, err := p.reader.Open()
	if err != nil {
		return Checkpoint{}, err
	}
	if len(open) > 0 && string(open) != source {
		return Checkpoint{}, fmt.Errorf("%w: finish %q first by running it again", ErrInterrupted, open)
	}
	b, err := p.reader.Checkpoint(source)
	if err != nil {
		return Checkpoint{}, err
	}
	p.source = source
	p.ckpt = Checkpoint{Counts: Counts{Rejected: map[event.Reason]uint64{}}}
	if b != nil {
		if err := p.ckpt.UnmarshalBinary(b); err != nil {
			return Checkpoint{}, fmt.Errorf("pipeline: source %q: %w", source, err)
		}
	}
	p.lastCommit = p.now()
	cp := p.ckpt
	cp.Pending = append([]uint64(nil), p.ckpt.Pending...)
	p.ckpt.Done = false
	// The restored progress is the committed status until the next commit.
	p.mu.Lock()
	p.status.Source, p.status.Counts, p.status.Next = source, p.ckpt.Counts.clone(), p.ckpt.Next
	if wm := p.reorder.Watermark(); wm != minInt64 {
		p.status.Watermark = time.Unix(0, wm).UTC()
	}
	if latest := p.reorder.MaxSeen(); latest != minInt64 {
		p.status.LatestEvent = time.Unix(0, latest).UTC()
	}
	p.mu.Unlock()
	if p.cfg.PersistPending {
		err := p.reader.Pending(source, func(pos uint64, payload []byte) error {
			e, err := p.dec.Decode(payload) // stored with its pseudonym already
			if err != nil {
				return fmt.Errorf("stored buffered event %d: %w", pos, err)
			}
			p.reorder.Readmit(&e, pos)
			p.persisted[pos] = true
			return nil
		})
		if err != nil {
			return Checkpoint{}, fmt.Errorf("pipeline: restore buffered events: %w", err)
		}
	}
	return cp, nil
}

// Stats describe the processor's work since it was made.
type Stats struct {
	Commits    int           // commits started
	CommitWait time.Duration // time the processing goroutine waited for the previous commit
	Users      int           // user states written
}

// Stats returns the processor's statistics.
func (p *Processor) Stats() Stats { return p.stats }

// Counts returns the source's counters so far (committed or not).
func (p *Processor) Counts() Counts { return p.ckpt.Counts.clone() }

// Watermark returns the current watermark (Unix ns) and the largest event
// time seen.
func (p *Processor) Watermark() (wm, maxSeen int64) {
	return p.reorder.Watermark(), p.reorder.MaxSeen()
}

// Readmit re-reads an event that was buffered at the last commit. It was
// validated then, so it decodes again.
func (p *Processor) Readmit(ctx context.Context, pos uint64, payload []byte) error {
	e, err := p.dec.Decode(payload)
	return p.ReadmitDecoded(pos, payload, &e, err)
}

// ReadmitDecoded is Readmit for an input decoded by the caller.
func (p *Processor) ReadmitDecoded(pos uint64, payload []byte, e *event.Event, decodeErr error) error {
	if decodeErr != nil {
		return fmt.Errorf("pipeline: buffered input %d no longer decodes (input changed since it was read?): %w", pos, decodeErr)
	}
	if p.cfg.Pseudonyms != nil {
		e.User = p.cfg.Pseudonyms.Pseudonym(e.User)
	}
	if p.suspect(e.Time.UnixNano()) {
		// Held aside when it was read: held again, undecided (see clock.go).
		return p.hold(pos, e, payload, false)
	}
	p.reorder.Readmit(e, pos)
	return nil
}

// Offer processes one new input at position pos (positions increase).
func (p *Processor) Offer(ctx context.Context, pos uint64, payload []byte) error {
	e, err := p.dec.Decode(payload)
	return p.OfferDecoded(ctx, Origin{Pos: pos}, payload, &e, err)
}

// NewDecoder returns a decoder configured like the processor's, for callers
// that decode on another goroutine and use OfferDecoded.
func (p *Processor) NewDecoder() *event.Decoder {
	return event.NewDecoder(p.cfg.Limits, p.cfg.Currency)
}

// OfferDecoded is Offer for an input from o the caller decoded with a
// decoder from NewDecoder (decodeErr is its error). payload must stay valid
// during the call.
func (p *Processor) OfferDecoded(ctx context.Context, o Origin, payload []byte, e *event.Event, decodeErr error) error {
	pos := o.Pos
	if pos+1 > p.ckpt.Next {
		p.ckpt.Next = pos + 1
	}
	if decodeErr == nil && p.cfg.Pseudonyms != nil {
		e.User = p.cfg.Pseudonyms.Pseudonym(e.User)
	}
	if decodeErr != nil {
		var re *event.RejectError
		if !errors.As(decodeErr, &re) {
			return fmt.Errorf("pipeline: decode input %d: %w", pos, decodeErr)
		}
		if err := p.reject(o, re.Reason, re.Error(), payload); err != nil {
			return err
		}
	} else if r, msg := p.insane(e.Time.UnixNano()); r != "" {
		if err := p.reject(o, r, msg, payload); err != nil {
			return err
		}
	} else if p.suspect(e.Time.UnixNano()) {
		if err := p.hold(pos, e, payload, true); err != nil {
			return err
		}
	} else if err := p.admit(o, e, payload); err != nil {
		return err
	}
	if len(p.held) > 0 {
		if err := p.decideHeld(pos+1, false); err != nil {
			return err
		}
	}
	p.lastArrival = p.now()
	p.sinceCommit++
	if p.needCommit() {
		return p.commit(ctx, false)
	}
	return nil
}

func (p *Processor) reject(o Origin, r event.Reason, msg string, payload []byte) error {
	p.ckpt.Counts.Rejected[r]++
	return p.rejectRecord(o, r, msg, payload)
}

func (p *Processor) rejectRecord(o Origin, r event.Reason, msg string, payload []byte) error {
	if p.rejects == nil {
		return nil
	}
	if p.cfg.Pseudonyms != nil {
		payload = privacy.Redact(payload)
	}
	if err := p.rejects.Reject(o, r, msg, payload); err != nil {
		return fmt.Errorf("pipeline: record reject: %w", err)
	}
	return nil
}

func (p *Processor) release() error {
	var ferr error
	p.reorder.Release(func(it *sessionize.Item) {
		if ferr == nil {
			p.forgetPending(it.Pos)
			ferr = p.apply(&it.Event)
		}
	})
	return ferr
}

// ForgetReport says what an erasure removed.
type ForgetReport struct {
	User         string    `json:"user"`          // as stored (the pseudonym when a key is configured)
	HadState     bool      `json:"had_state"`     // session, journey and de-duplication state was deleted
	Buffered     int       `json:"buffered"`      // events waiting in the reorder buffer that will be dropped
	DroppedUntil time.Time `json:"dropped_until"` // events for the user arriving before this (wall clock) are dropped
}

// Forget erases a user: their stored session, journey and de-duplication
// state is deleted in the next commit, buffered events for them are dropped
// when released, and events for them arriving within the allowed lateness
// plus the commit interval from now are dropped (counted as erased), so
// late copies do not recreate the state. Aggregate counters hold no
// identifiers and stay. id is the raw id; it is pseudonymised like input.
// After the commit every version of the person's state is dropped from the
// store's files (state.Store.EraseUser), and the erasure marker holds only
// a hash of the id (state.ForgetKey).
func (p *Processor) Forget(ctx context.Context, id string) (ForgetReport, error) {
	if p.cfg.Pseudonyms != nil {
		id = p.cfg.Pseudonyms.Pseudonym(id)
	}
	r := ForgetReport{User: id}
	c, err := p.user(id)
	if err != nil {
		return r, err
	}
	r.HadState = c.dirty || c.u.LastAction != 0 || len(c.u.Touches) > 0 || len(c.u.Seen) > 0
	if c.dirty {
		c.dirty = false
		p.ndirty--
	}
	delete(p.cur, id)
	delete(p.prev, id)
	r.Buffered = p.reorder.CountUser(id)
	until := p.now().Add(p.cfg.Lateness + p.cfg.CommitInterval + time.Minute)
	r.DroppedUntil = until.UTC()
	p.forgotten[state.ForgetKey(id)] = until.UnixNano()
	p.erase[id] = until.UnixNano()
	if err := p.commit(ctx, true); err != nil {
		return r, err
	}
	// The deletion is committed; now every version, the deletion marker
	// included, leaves the disk.
	if err := p.store.EraseUser(id); err != nil {
		return r, fmt.Errorf("pipeline: erase %s from disk: %w", id, err)
	}
	return r, nil
}

// forgetPending notes that the buffered event at pos was applied.
func (p *Processor) forgetPending(pos uint64) {
	if !p.cfg.PersistPending {
		return
	}
	if _, ok := p.pendingNew[pos]; ok {
		delete(p.pendingNew, pos) // pushed and applied between two commits
		return
	}
	if p.persisted[pos] {
		delete(p.persisted, pos)
		p.released = append(p.released, pos)
	}
}

// now is the processor's wall clock: Config.Now, else time.Now.
func (p *Processor) now() time.Time {
	if p.cfg.Now != nil {
		return p.cfg.Now()
	}
	return time.Now()
}

// Tick lets event time advance with the wall clock while the input is quiet:
// the watermark rises as if an event at lastEvent + (now − last arrival),
// never beyond now, had arrived, so a partition that receives nothing still
// releases its buffered events and closes its sessions. The largest event
// time seen (where answers end) stays that of a real event. It also commits when the commit
// interval has passed with changes pending. Live input only: replay never
// uses the wall clock.
func (p *Processor) Tick(ctx context.Context, now time.Time) error {
	if p.lastArrival.IsZero() && p.reorder.Len() > 0 {
		// Restored buffered events and no new input yet: event time starts
		// following the wall clock from the largest time seen.
		if ms := p.reorder.MaxSeen(); ms != minInt64 {
			p.lastArrival, p.lastEvent = now, ms
		}
	}
	if !p.lastArrival.IsZero() && p.lastEvent != 0 {
		adv := p.lastEvent + int64(now.Sub(p.lastArrival))
		if adv > now.UnixNano() {
			adv = now.UnixNano()
		}
		p.reorder.Advance(adv)
		if err := p.release(); err != nil {
			return err
		}
	}
	if (p.sinceCommit > 0 || p.batch.Len() > 0 || len(p.released) > 0) && p.now().Sub(p.lastCommit) >= p.cfg.CommitInterval {
		return p.commit(ctx, false)
	}
	return nil
}

func (p *Processor) apply(e *event.Event) error {
	if len(p.forgotten) > 0 {
		k := state.ForgetKey(e.User)
		if until, ok := p.forgotten[k]; ok {
			if p.now().UnixNano() < until {
				p.ckpt.Counts.Erased++
				return nil
			}
			delete(p.forgotten, k)
		}
	}
	c, err := p.user(e.User)
	if err != nil {
		return err
	}
	if p.tracker.Apply(&c.u, e, xxhash.Sum64String(e.ID), p.batch) {
		p.ckpt.Counts.Accepted++
		if !c.dirty {
			c.dirty = true
			p.known.Add(xxhash.Sum64String(e.User))
			p.ndirty++
			// Size when first dirtied plus room to grow until the commit.
			p.dirtyBytes += int64(len(e.User)) + c.u.SizeEstimate() + 96
		}
	} else {
		p.ckpt.Counts.Duplicate++
	}
	return nil
}

// user returns the cached state of a user, loading it from the store on a
// miss. Cache: two generations; a hit in the older one moves the entry to the
// newer one; at a commit the older generation is dropped when the newer one
// is over half the bound. Every dirty entry is in the newer generation.
func (p *Processor) user(id string) (*cached, error) {
	if c := p.cur[id]; c != nil {
		return c, nil
	}
	if c := p.prev[id]; c != nil {
		delete(p.prev, id)
		p.cur[id] = c
		return c, nil
	}
	c := &cached{}
	if !p.known.Has(xxhash.Sum64String(id)) {
		p.cur[id] = c // never stored: a new user
		return c, nil
	}
	b, err := p.reader.User(id)
	if err != nil {
		return nil, fmt.Errorf("pipeline: load user state: %w", err)
	}
	if b != nil {
		if err := c.u.UnmarshalBinary(b); err != nil {
			return nil, fmt.Errorf("pipeline: user state: %w", err)
		}
	}
	p.cur[id] = c
	return c, nil
}

func (p *Processor) needCommit() bool {
	// Counter deltas become one entry per touched bucket and resolution:
	// far fewer than batch keys; 48 bytes per key bounds their size.
	keys := int64(p.batch.Len())
	if p.sinceCommit >= p.cfg.CommitEvents || int64(p.ndirty)+keys >= p.maxEntries ||
		p.dirtyBytes+48*keys >= p.maxBytes {
		return true
	}
	if p.sinceCommit&1023 == 0 && p.now().Sub(p.lastCommit) >= p.cfg.CommitInterval {
		return true
	}
	return false
}

// Finish ends the source. With drain, every buffered event is released (the
// input is complete) and the source is marked done. It commits and waits.
func (p *Processor) Finish(ctx context.Context, drain bool) error {
	if drain {
		if err := p.decideHeld(p.ckpt.Next, true); err != nil {
			return err
		}
		var ferr error
		p.reorder.Drain(func(it *sessionize.Item) {
			if ferr == nil {
				p.forgetPending(it.Pos)
				ferr = p.apply(&it.Event)
			}
		})
		if ferr != nil {
			return ferr
		}
		p.ckpt.Done = true
	}
	if err := p.commit(ctx, true); err != nil {
		return err
	}
	if drain {
		if _, err := p.Prune(ctx); err != nil {
			return err
		}
	}
	return nil
}

// Prune deletes counter buckets older than their retention, measured back
// from the largest event time seen (state.Store.Prune). Replay runs it at the
// end; a live worker runs it on a schedule.
func (p *Processor) Prune(ctx context.Context) (state.PruneReport, error) {
	if p.inflight != nil {
		if err := <-p.inflight; err != nil {
			p.inflight = nil
			return state.PruneReport{}, err
		}
		p.inflight = nil
	}
	latest := p.reorder.MaxSeen()
	if latest == minInt64 {
		return state.PruneReport{}, nil
	}
	rep, err := p.store.Prune(ctx, latest, pruneLimit)
	if err == nil && rep.Buckets > 0 {
		p.log.Info("pruned expired buckets", "buckets", rep.Buckets)
	}
	return rep, err
}

// Close waits for an in-flight commit and releases the snapshot.
func (p *Processor) Close() error {
	var err error
	if p.inflight != nil {
		err = <-p.inflight
		p.inflight = nil
	}
	p.reader.Discard()
	return err
}

// commit hands the current changes to a background commit. At most one
// commit is in flight: the next waits for it, so a failed commit stops the
// processor before anything later is committed.
func (p *Processor) commit(ctx context.Context, wait bool) error {
	if p.inflight != nil {
		t0 := time.Now()
		err := <-p.inflight
		p.stats.CommitWait += time.Since(t0)
		if err != nil {
			p.inflight = nil
			return err
		}
		p.inflight = nil
		// Everything committed so far is visible to a new snapshot.
		p.reader.Discard()
		p.reader = p.store.NewReader()
	}
	c := &state.Commit{
		Source:      p.source,
		Users:       make(map[string][]byte),
		Counters:    p.batch,
		Checkpoints: map[string][]byte{},
	}
	for id, until := range p.erase {
		// The state itself is dropped right after this commit
		// (state.Store.EraseUser): a deletion here would leave a marker
		// holding the key on disk, and hide the key from the drop.
		if c.Forget == nil {
			c.Forget = make(map[string]int64)
		}
		c.Forget[id] = until
	}
	p.erase = make(map[string]int64)
	// One buffer for every dirty user's encoding: the commit owns it. If it
	// grows, earlier slices keep pointing into the old array, still valid.
	buf := make([]byte, 0, p.dirtyBytes)
	for id, e := range p.cur {
		if e.dirty {
			start := len(buf)
			buf = e.u.AppendBinary(buf)
			c.Users[id] = buf[start:len(buf):len(buf)]
			e.dirty = false
		}
	}
	p.batch = tally.NewBatch(p.batch.Step())
	p.stats.Commits++
	p.stats.Users += len(c.Users)
	cp := p.ckpt
	if p.cfg.PersistPending {
		c.Pending, c.Released = p.pendingNew, p.released
		for pos := range p.pendingNew {
			p.persisted[pos] = true
		}
		p.pendingNew, p.released = make(map[uint64][]byte), nil
		cp.Pending = nil
	} else {
		cp.Pending = p.heldPositions(p.reorder.Positions(nil))
		sort.Slice(cp.Pending, func(i, j int) bool { return cp.Pending[i] < cp.Pending[j] })
	}
	cp.Counts = p.ckpt.Counts.clone()
	cb, _ := cp.MarshalBinary()
	if p.source != "" {
		c.Checkpoints[p.source] = cb
	}
	switch {
	case p.source == "": // no input begun (an erasure alone): leave the marker as it is
	case len(cp.Pending) > 0 || (p.cfg.PersistPending && p.reorder.Len() > 0) || len(p.held) > 0:
		src := p.source
		c.Meta.Open = &src
	default:
		none := ""
		c.Meta.Open = &none
	}
	c.Meta.Watermark = &state.Watermark{MaxSeen: p.reorder.MaxSeen(), Floor: p.reorder.Floor()}
	if p.rejects != nil {
		mark, err := p.rejects.Sync()
		if err != nil {
			return fmt.Errorf("pipeline: sync rejects: %w", err)
		}
		c.Meta.RejectsLen = &mark
	}
	if len(p.cur) >= p.cfg.CacheUsers/2 {
		p.prev = p.cur
		p.cur = make(map[string]*cached, len(p.prev))
	}
	p.sinceCommit = 0
	p.ndirty = 0
	p.dirtyBytes = 0
	p.lastCommit = p.now()
	ch := make(chan error, 1)
	p.inflight = ch
	source, buffered := p.source, p.reorder.Len()
	wm, latest := p.reorder.Watermark(), p.reorder.MaxSeen()
	go func() {
		st, err := p.store.Commit(ctx, c)
		if err == nil {
			p.log.Debug("committed", "entries", st.Entries, "bytes", st.Bytes, "took", st.Took)
			p.mu.Lock()
			p.status = Status{Source: source, Counts: cp.Counts, Next: cp.Next, Commits: p.status.Commits + 1,
				LastCommit: p.now(), CommitTook: st.Took, Buffered: buffered}
			if wm != minInt64 {
				p.status.Watermark = time.Unix(0, wm).UTC()
			}
			if latest != minInt64 {
				p.status.LatestEvent = time.Unix(0, latest).UTC()
			}
			p.mu.Unlock()
			if p.cfg.OnCommit != nil {
				p.cfg.OnCommit(source, cp)
			}
		}
		ch <- err
	}()
	if wait {
		err := <-ch
		p.inflight = nil
		p.reader.Discard()
		p.reader = p.store.NewReader()
		return err
	}
	return nil
}
