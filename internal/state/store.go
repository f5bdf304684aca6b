package state

import (
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"fmt"
	"log/slog"
	"os"
	"sort"
	"strings"
	"time"

	"github.com/dgraph-io/badger/v4"
	"github.com/dgraph-io/badger/v4/options"
	"github.com/dgraph-io/ristretto/v2/z"

	"github.com/touchledger/touchledger/internal/tally"
)

// Resolution is one bucket size with its retention (0 = keep forever).
type Resolution struct {
	Name      string
	Step      time.Duration
	Retention time.Duration
}

// Options configure a Store.
type Options struct {
	Dir           string
	Resolutions   []Resolution // finest first; each step divides the next
	MemtableMiB   int          // Badger memtable size (bounds one commit to 15 % of it)
	BlockCacheMiB int
	IndexCacheMiB int
	Logger        *slog.Logger
}

// DefaultOptions returns options for dir with deliberate, small Badger caches.
func DefaultOptions(dir string) Options {
	return Options{
		Dir: dir,
		Resolutions: []Resolution{
			{"5m", 5 * time.Minute, 14 * 24 * time.Hour},
			{"hour", time.Hour, 90 * 24 * time.Hour},
			{"day", 24 * time.Hour, 0},
		},
		MemtableMiB:   64,
		BlockCacheMiB: 32,
		IndexCacheMiB: 16,
	}
}

// Validate checks the options.
func (o Options) Validate() error {
	if o.Dir == "" {
		return errors.New("state: data directory is empty")
	}
	if len(o.Resolutions) == 0 {
		return errors.New("state: at least one resolution is needed")
	}
	if len(o.Resolutions) > 255 {
		return errors.New("state: too many resolutions")
	}
	for i, r := range o.Resolutions {
		if r.Step <= 0 || r.Step%time.Second != 0 {
			return fmt.Errorf("state: resolution %q: step must be a positive whole number of seconds", r.Name)
		}
		if r.Retention < 0 {
			return fmt.Errorf("state: resolution %q: negative retention", r.Name)
		}
		if i > 0 {
			prev := o.Resolutions[i-1]
			if r.Step <= prev.Step || r.Step%prev.Step != 0 {
				return fmt.Errorf("state: resolution %q: step %v must be a multiple of %q's %v", r.Name, r.Step, prev.Name, prev.Step)
			}
		}
	}
	last := o.Resolutions[len(o.Resolutions)-1].Step
	if last < tally.PathStep*time.Second || last%(tally.PathStep*time.Second) != 0 {
		return fmt.Errorf("state: the coarsest resolution must be a multiple of %v (path statistics are kept at that size)", tally.PathStep*time.Second)
	}
	if o.MemtableMiB < 8 || o.BlockCacheMiB < 1 || o.IndexCacheMiB < 1 {
		return errors.New("state: memtable must be >= 8 MiB and caches >= 1 MiB")
	}
	return nil
}

// Store is an open data directory.
type Store struct {
	db  *badger.DB
	opt Options

	seq    uint64         // last commit sequence number (suffix of counter delta keys)
	deltas map[blobID]int // delta keys per bucket written by this process since the last merge
}

// ErrLocked is returned by Open when another process holds the directory.
var ErrLocked = errors.New("state: data directory is in use by another process (a running worker?); ask the worker instead")

// Open opens (creating if needed) the store in o.Dir.
func Open(ctx context.Context, o Options) (*Store, error) {
	s, err := openRaw(o)
	if err != nil {
		return nil, err
	}
	if err := s.checkFormat(); err != nil {
		s.db.Close()
		return nil, err
	}
	if err := s.restoreJournal(false); err != nil {
		s.db.Close()
		return nil, err
	}
	r := s.NewReader()
	defer r.Discard()
	b, err := r.Meta(metaSeq)
	if err != nil {
		s.db.Close()
		return nil, err
	}
	if len(b) == 8 {
		s.seq = binary.BigEndian.Uint64(b)
	}
	return s, nil
}

// openRaw opens the Badger directory with our options, without checks.
func openRaw(o Options) (*Store, error) {
	if err := o.Validate(); err != nil {
		return nil, err
	}
	if err := os.MkdirAll(o.Dir, 0o750); err != nil {
		return nil, fmt.Errorf("state: create %s: %w", o.Dir, err)
	}
	bo := badger.DefaultOptions(o.Dir).
		WithMemTableSize(int64(o.MemtableMiB) << 20).
		WithNumMemtables(2).
		WithNumLevelZeroTables(4).
		WithNumLevelZeroTablesStall(10).
		WithBlockCacheSize(int64(o.BlockCacheMiB) << 20).
		WithIndexCacheSize(int64(o.IndexCacheMiB) << 20).
		WithValueLogFileSize(64 << 20).
		WithNumCompactors(2).
		WithDetectConflicts(false).
		WithNumVersionsToKeep(1).
		WithMetricsEnabled(false).
		WithLogger(badgerLogger{o.Logger}).
		// Corruption is refused, never read: every table's checksums are
		// checked before Badger opens (checkFiles), every block's when read,
		// every value's.
		WithChecksumVerificationMode(options.OnBlockRead).
		WithVerifyValueChecksum(true)
	if err := lockFree(o.Dir); err != nil {
		return nil, err
	}
	if err := checkFiles(o.Dir); err != nil {
		return nil, err
	}
	db, err := openBadger(bo)
	if err != nil && strings.Contains(err.Error(), z.NewFile.Error()) { // Badger wraps without %w
		// A process killed right after Badger created a memtable file leaves
		// that file empty, and the next Open fails with z.NewFile; Open has
		// then set the file up and a second Open succeeds (Badger issue
		// #2207, open as of v4.9). Our kill -9 test hits this.
		db, err = openBadger(bo)
	}
	if err != nil {
		if errors.Is(err, ErrCorrupt) {
			return nil, fmt.Errorf("state: open %s: %w", o.Dir, err)
		}
		if errors.Is(err, badger.ErrTruncateNeeded) {
			return nil, fmt.Errorf("state: open %s: %w", o.Dir, err)
		}
		if isLockErr(err) {
			return nil, fmt.Errorf("%w (%v)", ErrLocked, err)
		}
		return nil, fmt.Errorf("state: open %s: %w", o.Dir, err)
	}
	return &Store{db: db, opt: o, deltas: make(map[blobID]int)}, nil
}

func isLockErr(err error) bool {
	return err != nil && (strings.Contains(err.Error(), "Cannot acquire directory lock") ||
		strings.Contains(err.Error(), "resource temporarily unavailable"))
}

// Close closes the store.
func (s *Store) Close() error { return s.db.Close() }

// Resolutions returns the store's resolutions, finest first.
func (s *Store) Resolutions() []Resolution { return s.opt.Resolutions }

// FamilyResolutions returns the indices of the resolutions family f is kept
// at (steps of at least tally.MinStep(f)), finest first.
func (s *Store) FamilyResolutions(f tally.Family) []int {
	return FamilyResolutions(s.opt.Resolutions, f)
}

// FamilyResolutions returns the indices of the resolutions in rs that family
// f is kept at, finest first.
func FamilyResolutions(rs []Resolution, f tally.Family) []int {
	var out []int
	for i, r := range rs {
		if int64(r.Step/time.Second) >= tally.MinStep(f) {
			out = append(out, i)
		}
	}
	return out
}

// Limits returns the largest commit Badger accepts: bytes and entries.
func (s *Store) Limits() (bytes, entries int64) { return s.db.MaxBatchSize(), s.db.MaxBatchCount() }

// formatVersion is the first byte of the "format" meta key. Version 2 names
// the states the tool adds @entry, @converted, @lost and @exit (version 1
// used other names) and keeps path keys joined with " → "; a version 1
// directory is refused, not migrated (no release used it).
const formatVersion = 2

// ErrFormat is returned by Open when the directory was written in another
// store format version: replay the events into a new directory.
var ErrFormat = errors.New("store format version differs")

// checkFormat records the format version and resolutions on first use and
// refuses a directory written in another format version (ErrFormat) or with
// other resolutions (its buckets would not line up).
func (s *Store) checkFormat() error {
	want := encodeResolutions(s.opt.Resolutions)
	return s.db.Update(func(txn *badger.Txn) error {
		it, err := txn.Get(metaKey("format"))
		switch {
		case errors.Is(err, badger.ErrKeyNotFound):
			return txn.Set(metaKey("format"), want)
		case err != nil:
			return err
		}
		return it.Value(func(got []byte) error {
			if len(got) == 0 || got[0] != formatVersion {
				v := 0
				if len(got) > 0 {
					v = int(got[0])
				}
				return fmt.Errorf("state: %s holds store format %d, this build reads format %d; replay the events into a new directory: %w", s.opt.Dir, v, formatVersion, ErrFormat)
			}
			if string(got) != string(want) {
				return fmt.Errorf("state: %s was written with other bucket resolutions; use the configuration it was created with or a new directory", s.opt.Dir)
			}
			return nil
		})
	})
}

func encodeResolutions(rs []Resolution) []byte {
	b := []byte{formatVersion}
	for _, r := range rs {
		b = binary.AppendUvarint(b, uint64(r.Step/time.Second))
	}
	return b
}

// Key prefixes. See docs/storage.md.
const (
	prefixUser       = 'u'
	prefixCounter    = 'c'
	prefixCheckpoint = 'k'
	prefixMeta       = 'm'
	prefixPending    = 'p'
	prefixForgotten  = 'f'
)

// pendingKey is 'p' | source | 0x00 | position (8 bytes, big-endian).
func pendingKey(source string, pos uint64) []byte {
	k := make([]byte, 0, len(source)+10)
	k = append(k, prefixPending)
	k = append(k, source...)
	k = append(k, 0)
	return binary.BigEndian.AppendUint64(k, pos)
}

func userKey(id string) []byte { return append([]byte{prefixUser}, id...) }

func metaKey(name string) []byte { return append([]byte{prefixMeta}, name...) }

func checkpointKey(source string) []byte { return append([]byte{prefixCheckpoint}, source...) }

// counterKey is 'c' | resolution index | family | bucket start (Unix seconds,
// big-endian with the sign bit flipped so keys sort by time) | commit
// sequence number (big-endian). A bucket's value is the sum of its delta
// keys.
func counterKey(res int, f tally.Family, bucket int64, seq uint64) []byte {
	k := make([]byte, 19)
	k[0] = prefixCounter
	k[1] = byte(res)
	k[2] = byte(f)
	binary.BigEndian.PutUint64(k[3:], uint64(bucket)^(1<<63))
	binary.BigEndian.PutUint64(k[11:], seq)
	return k
}

// metaSeq holds the last commit sequence number (8 bytes, big-endian).
const metaSeq = "seq"

// mergeAt is the number of delta keys a bucket may collect (from this
// process's commits) before a commit merges them into one.
const mergeAt = 8

func bucketOfKey(k []byte) int64 { return int64(binary.BigEndian.Uint64(k[3:11]) ^ (1 << 63)) }

// Commit is one atomic unit of change.
type Commit struct {
	Source      string            // the input the pending events below belong to
	Pending     map[uint64][]byte // input position → payload of an event now waiting in the reorder buffer
	Released    []uint64          // positions of persisted pending events that were applied
	Users       map[string][]byte // user id → encoded state; nil value deletes
	Counters    *tally.Batch      // deltas at the finest resolution, fanned out to all
	Checkpoints map[string][]byte // source → encoded checkpoint
	Forget      map[string]int64  // user id → Unix ns until which events for the user are dropped (kept with a TTL)
	Meta        Meta              // the metadata to record; unset fields are left as stored
}

// Meta is what a commit records about the input beside the state. Each
// set field is written under its fixed key (MetaWatermark, MetaOpen,
// MetaRejects, and Keys under their own names), encoded as docs/storage.md
// describes; nil fields leave the stored value as it is.
type Meta struct {
	Watermark *Watermark // the largest event time seen and the watermark floor
	// Open is the source whose buffered events are pending; "" records that
	// none is.
	Open *string
	// RejectsLen is the committed length of the rejects file, in bytes.
	RejectsLen *int64
	// Keys are the privacy key records (pipeline.CheckKey), by name.
	Keys map[string][]byte
}

// Watermark is the event-time position of the committed state: MaxSeen the
// largest event time seen, Floor the watermark floor (Unix ns).
type Watermark struct{ MaxSeen, Floor int64 }

// encode lists the meta entries to write.
func (m Meta) encode() map[string][]byte {
	out := make(map[string][]byte, len(m.Keys)+3)
	for name, v := range m.Keys {
		out[name] = v
	}
	if m.Watermark != nil {
		out[MetaWatermark] = EncodeWatermark(m.Watermark.MaxSeen, m.Watermark.Floor)
	}
	if m.Open != nil {
		out[MetaOpen] = []byte(*m.Open)
	}
	if m.RejectsLen != nil {
		out[MetaRejects] = binary.AppendVarint(nil, *m.RejectsLen)
	}
	return out
}

// CommitStats describes a finished commit.
type CommitStats struct {
	Entries int
	Bytes   int64
	Took    time.Duration
}

// Commit writes c in one transaction.
func (s *Store) Commit(ctx context.Context, c *Commit) (CommitStats, error) {
	start := time.Now()
	var st CommitStats
	if err := ctx.Err(); err != nil {
		return st, err
	}
	txn := s.db.NewTransaction(true)
	defer txn.Discard()
	set := func(k, v []byte) error {
		st.Entries++
		st.Bytes += int64(len(k) + len(v))
		if err := txn.Set(k, v); err != nil {
			return fmt.Errorf("state: set %q: %w", k[:1], err)
		}
		return nil
	}
	for id, v := range c.Users {
		if v == nil {
			st.Entries++
			if err := txn.Delete(userKey(id)); err != nil {
				return st, fmt.Errorf("state: delete user: %w", err)
			}
			continue
		}
		if err := set(userKey(id), v); err != nil {
			return st, err
		}
	}
	if c.Counters != nil {
		if err := s.mergeCounters(txn, c.Counters, set); err != nil {
			return st, err
		}
	}
	for pos, v := range c.Pending {
		if err := set(pendingKey(c.Source, pos), v); err != nil {
			return st, err
		}
	}
	for _, pos := range c.Released {
		st.Entries++
		if err := txn.Delete(pendingKey(c.Source, pos)); err != nil {
			return st, fmt.Errorf("state: delete pending: %w", err)
		}
	}
	for src, v := range c.Checkpoints {
		if err := set(checkpointKey(src), v); err != nil {
			return st, err
		}
	}
	for id, until := range c.Forget {
		e := badger.NewEntry(append([]byte{prefixForgotten}, ForgetKey(id)...), binary.AppendVarint(nil, until))
		if ttl := time.Until(time.Unix(0, until)); ttl > 0 {
			e = e.WithTTL(ttl + time.Minute)
		}
		st.Entries++
		if err := txn.SetEntry(e); err != nil {
			return st, fmt.Errorf("state: set erasure marker: %w", err)
		}
	}
	for name, v := range c.Meta.encode() {
		if err := set(metaKey(name), v); err != nil {
			return st, err
		}
	}
	if err := txn.Commit(); err != nil {
		return st, fmt.Errorf("state: commit: %w", err)
	}
	st.Took = time.Since(start)
	return st, nil
}

type blobID struct {
	res    int
	fam    tally.Family
	bucket int64
}

// mergeCounters writes the batch as one delta table per touched (resolution,
// family, bucket), keyed with this commit's sequence number: no reads, no
// rewriting of large tables. A bucket that collected mergeAt deltas is merged
// into a single key in the same transaction, so reads stay bounded.
func (s *Store) mergeCounters(txn *badger.Txn, b *tally.Batch, set func(k, v []byte) error) error {
	groups := make(map[blobID]tally.Table)
	steps := make([]int64, len(s.opt.Resolutions))
	for i, r := range s.opt.Resolutions {
		steps[i] = int64(r.Step / time.Second)
	}
	if b.Step() != steps[0] {
		return fmt.Errorf("state: batch step %ds does not match the finest resolution %ds", b.Step(), steps[0])
	}
	b.Range(func(k tally.Key, v tally.Vec) {
		min := tally.MinStep(k.Family)
		for i, step := range steps {
			if step < min {
				continue
			}
			id := blobID{i, k.Family, tally.FloorDiv(k.Bucket, step) * step}
			t := groups[id]
			if t == nil {
				t = make(tally.Table)
				groups[id] = t
			}
			t[k.Dims] = t[k.Dims].Add(v)
		}
	})
	s.seq++
	seq := make([]byte, 8)
	binary.BigEndian.PutUint64(seq, s.seq)
	if err := set(metaKey(metaSeq), seq); err != nil {
		return err
	}
	var (
		buf  []byte
		snap *badger.Txn // committed state before this commit, for merging
	)
	defer func() {
		if snap != nil {
			snap.Discard()
		}
	}()
	for id, delta := range groups {
		if n := s.deltas[id] + 1; n >= mergeAt {
			if snap == nil {
				snap = s.db.NewTransaction(false)
			}
			if err := s.mergeBucket(snap, txn, id, delta); err != nil {
				return err
			}
			delete(s.deltas, id)
		} else {
			s.deltas[id] = n
		}
		buf = tally.AppendTable(buf[:0], delta)
		if err := set(counterKey(id.res, id.fam, id.bucket, s.seq), append([]byte(nil), buf...)); err != nil {
			return err
		}
	}
	return nil
}

// mergeBucket adds every committed delta of a bucket (read from snap) into t
// and deletes them in txn. Commits are serialised, so snap sees every delta.
func (s *Store) mergeBucket(snap, txn *badger.Txn, id blobID, t tally.Table) error {
	opts := badger.DefaultIteratorOptions
	opts.Prefix = counterKey(id.res, id.fam, id.bucket, 0)[:11]
	it := snap.NewIterator(opts)
	defer it.Close()
	var dead [][]byte
	for it.Rewind(); it.Valid(); it.Next() {
		if err := it.Item().Value(func(v []byte) error { return tally.DecodeTable(v, t) }); err != nil {
			return fmt.Errorf("state: merge bucket %d: %w", id.bucket, err)
		}
		dead = append(dead, it.Item().KeyCopy(nil))
	}
	it.Close()
	for _, k := range dead {
		if err := txn.Delete(k); err != nil {
			return fmt.Errorf("state: merge bucket: %w", err)
		}
	}
	return nil
}

// Reader is a consistent snapshot of the store. Discard it when done.
type Reader struct {
	txn *badger.Txn
	s   *Store
}

// NewReader opens a snapshot.
func (s *Store) NewReader() *Reader { return &Reader{txn: s.db.NewTransaction(false), s: s} }

// Discard releases the snapshot.
func (r *Reader) Discard() { r.txn.Discard() }

// User returns the encoded state of a user, or nil if there is none. The
// bytes are a copy.
func (r *Reader) User(id string) ([]byte, error) { return r.get(userKey(id)) }

// Checkpoint returns a source's encoded checkpoint, or nil.
func (r *Reader) Checkpoint(source string) ([]byte, error) { return r.get(checkpointKey(source)) }

// Meta returns a metadata value, or nil.
func (r *Reader) Meta(name string) ([]byte, error) { return r.get(metaKey(name)) }

func (r *Reader) get(k []byte) ([]byte, error) {
	item, err := r.txn.Get(k)
	if errors.Is(err, badger.ErrKeyNotFound) {
		return nil, nil
	}
	if err != nil {
		return nil, fmt.Errorf("state: get: %w", err)
	}
	return item.ValueCopy(nil)
}

// Buckets calls fn for every stored bucket of family f at resolution res whose
// start lies in [from, to) (Unix seconds), in time order, with the decoded
// table of that bucket.
func (r *Reader) Buckets(res int, f tally.Family, from, to int64, fn func(bucket int64, t tally.Table) error) error {
	opts := badger.DefaultIteratorOptions
	opts.PrefetchValues = false
	prefix := []byte{prefixCounter, byte(res), byte(f)}
	opts.Prefix = prefix
	it := r.txn.NewIterator(opts)
	defer it.Close()
	end := counterKey(res, f, to, 0)
	var (
		cur int64
		t   tally.Table
	)
	for it.Seek(counterKey(res, f, from, 0)); it.ValidForPrefix(prefix); it.Next() {
		k := it.Item().Key()
		if string(k) >= string(end) {
			break
		}
		b := bucketOfKey(k)
		if t != nil && b != cur {
			if err := fn(cur, t); err != nil {
				return err
			}
			t = nil
		}
		if t == nil {
			t, cur = make(tally.Table), b
		}
		if err := it.Item().Value(func(v []byte) error { return tally.DecodeTable(v, t) }); err != nil {
			return fmt.Errorf("state: bucket %d: %w", b, err)
		}
	}
	if t != nil {
		return fn(cur, t)
	}
	return nil
}

// Sum adds into t every bucket of family f at resolution res in [from, to).
func (r *Reader) Sum(res int, f tally.Family, from, to int64, t tally.Table) error {
	return r.Buckets(res, f, from, to, func(_ int64, b tally.Table) error {
		t.AddTable(b)
		return nil
	})
}

// Pending calls fn, in position order, for every persisted pending event of
// a source (events that were waiting in the reorder buffer at the last
// commit).
func (r *Reader) Pending(source string, fn func(pos uint64, payload []byte) error) error {
	opts := badger.DefaultIteratorOptions
	prefix := pendingKey(source, 0)[:len(source)+2]
	opts.Prefix = prefix
	it := r.txn.NewIterator(opts)
	defer it.Close()
	for it.Rewind(); it.Valid(); it.Next() {
		k := it.Item().Key()
		if len(k) != len(prefix)+8 {
			continue
		}
		v, err := it.Item().ValueCopy(nil)
		if err != nil {
			return err
		}
		if err := fn(binary.BigEndian.Uint64(k[len(prefix):]), v); err != nil {
			return err
		}
	}
	return nil
}

// Forgotten calls fn for every erasure marker still alive: the ForgetKey
// of a user erased recently, with the Unix ns time until which their
// events are dropped.
func (r *Reader) Forgotten(fn func(key string, until int64) error) error {
	opts := badger.DefaultIteratorOptions
	opts.Prefix = []byte{prefixForgotten}
	it := r.txn.NewIterator(opts)
	defer it.Close()
	for it.Rewind(); it.Valid(); it.Next() {
		var until int64
		if err := it.Item().Value(func(v []byte) error {
			var n int
			until, n = binary.Varint(v)
			if n <= 0 {
				return errors.New("state: corrupt erasure marker")
			}
			return nil
		}); err != nil {
			return err
		}
		if err := fn(string(it.Item().Key()[1:]), until); err != nil {
			return err
		}
	}
	return nil
}

// Users calls fn for every stored user id (for erasure scans and tests).
func (r *Reader) Users(fn func(id string) error) error {
	opts := badger.DefaultIteratorOptions
	opts.PrefetchValues = false
	opts.Prefix = []byte{prefixUser}
	it := r.txn.NewIterator(opts)
	defer it.Close()
	for it.Rewind(); it.Valid(); it.Next() {
		if err := fn(string(it.Item().Key()[1:])); err != nil {
			return err
		}
	}
	return nil
}

// MetaPrefix returns every meta entry whose name starts with prefix, by name.
func (r *Reader) MetaPrefix(prefix string) (map[string][]byte, error) {
	opts := badger.DefaultIteratorOptions
	opts.Prefix = metaKey(prefix)
	it := r.txn.NewIterator(opts)
	defer it.Close()
	out := map[string][]byte{}
	for it.Rewind(); it.Valid(); it.Next() {
		v, err := it.Item().ValueCopy(nil)
		if err != nil {
			return nil, fmt.Errorf("state: meta: %w", err)
		}
		out[string(it.Item().Key()[1:])] = v
	}
	return out, nil
}

// Checkpoints calls fn for every committed source and its checkpoint.
func (r *Reader) Checkpoints(fn func(source string, cp []byte) error) error {
	opts := badger.DefaultIteratorOptions
	opts.Prefix = []byte{prefixCheckpoint}
	it := r.txn.NewIterator(opts)
	defer it.Close()
	for it.Rewind(); it.Valid(); it.Next() {
		v, err := it.Item().ValueCopy(nil)
		if err != nil {
			return fmt.Errorf("state: checkpoint: %w", err)
		}
		if err := fn(string(it.Item().Key()[1:]), v); err != nil {
			return err
		}
	}
	return nil
}

type badgerLogger struct{ l *slog.Logger }

func (b badgerLogger) Errorf(f string, a ...any) {
	if b.l != nil {
		b.l.Error(fmt.Sprintf(f, a...), "component", "badger")
	}
}
func (b badgerLogger) Warningf(f string, a ...any) {
	if b.l != nil {
		b.l.Warn(fmt.Sprintf(f, a...), "component", "badger")
	}
}
func (b badgerLogger) Infof(string, ...any)  {}
func (b badgerLogger) Debugf(string, ...any) {}

// Metadata names written by the pipeline and read by queries.
const (
	MetaWatermark = "watermark" // varint largest event time seen (Unix ns) | varint watermark floor
	MetaRejects   = "rejects"   // varint committed length of the rejects file
	MetaOpen      = "open"      // source whose buffered events are pending ("" when none)
)

// EncodeWatermark encodes the MetaWatermark value.
func EncodeWatermark(maxSeen, floor int64) []byte {
	return binary.AppendVarint(binary.AppendVarint(nil, maxSeen), floor)
}

// Watermark returns the committed largest event time seen and watermark
// floor; ok is false when nothing was committed yet.
func (r *Reader) Watermark() (maxSeen, floor int64, ok bool, err error) {
	b, err := r.Meta(MetaWatermark)
	if err != nil || b == nil {
		return 0, 0, false, err
	}
	maxSeen, n1 := binary.Varint(b)
	if n1 <= 0 {
		return 0, 0, false, errors.New("state: corrupt watermark")
	}
	floor, n2 := binary.Varint(b[n1:])
	if n2 <= 0 {
		return 0, 0, false, errors.New("state: corrupt watermark")
	}
	return maxSeen, floor, true, nil
}

// Open returns the source whose buffered events are pending ("" when none).
func (r *Reader) Open() (string, error) {
	b, err := r.Meta(MetaOpen)
	return string(b), err
}

// RejectsLen returns the committed length of the rejects file (0 when none
// was recorded).
func (r *Reader) RejectsLen() (int64, error) {
	b, err := r.Meta(MetaRejects)
	if err != nil || b == nil {
		return 0, err
	}
	n, k := binary.Varint(b)
	if k <= 0 {
		return 0, errors.New("state: corrupt rejects length")
	}
	return n, nil
}

// PruneReport says what Prune removed.
type PruneReport struct {
	Buckets int  // expired buckets dropped
	More    bool // more expired buckets are left for a later call
}

// Prune drops the counter buckets that are older than their resolution's
// retention, measured back from latest (the largest event time seen, Unix
// ns): a bucket of resolution r goes when its start is before latest −
// retention(r). Queries already ignore such buckets, so pruning changes no
// answer. The buckets are removed with Badger's DropPrefix, which rewrites
// the tables holding them, so the data leaves the disk (not just gains a
// delete marker). DropPrefix blocks writes while it runs: call Prune from the
// goroutine that commits (Processor.Prune does), not concurrently with a
// commit.
//
// DropPrefix costs a few milliseconds per bucket, so one call drops at most
// limit buckets (the oldest first; 0 = no limit) and reports whether more
// are left; call it again (a live worker does, on schedule).
func (s *Store) Prune(ctx context.Context, latest int64, limit int) (PruneReport, error) {
	var rep PruneReport
	var prefixes [][]byte
	err := s.db.View(func(txn *badger.Txn) error {
		for ri, r := range s.opt.Resolutions {
			if r.Retention <= 0 {
				continue
			}
			cut := latest/1e9 - int64(r.Retention/time.Second)
			for _, f := range tally.Families {
				if err := ctx.Err(); err != nil {
					return err
				}
				opts := badger.DefaultIteratorOptions
				opts.PrefetchValues = false
				prefix := []byte{prefixCounter, byte(ri), byte(f)}
				opts.Prefix = prefix
				it := txn.NewIterator(opts)
				end := counterKey(ri, f, cut, 0)
				var last []byte
				for it.Rewind(); it.ValidForPrefix(prefix); it.Next() {
					k := it.Item().Key()
					if string(k) >= string(end) {
						break
					}
					if last == nil || string(k[:11]) != string(last) {
						last = append([]byte(nil), k[:11]...)
						prefixes = append(prefixes, last)
					}
				}
				it.Close()
			}
		}
		return nil
	})
	if err != nil || len(prefixes) == 0 {
		return rep, err
	}
	if limit > 0 && len(prefixes) > limit {
		sort.Slice(prefixes, func(i, j int) bool { return bucketOfKey(prefixes[i]) < bucketOfKey(prefixes[j]) })
		prefixes, rep.More = prefixes[:limit], true
	}
	for _, p := range prefixes {
		delete(s.deltas, blobID{int(p[1]), tally.Family(p[2]), bucketOfKey(p)})
	}
	if err := s.db.DropPrefix(prefixes...); err != nil {
		return rep, fmt.Errorf("state: prune: %w", err)
	}
	rep.Buckets = len(prefixes)
	return rep, nil
}

// ForgetKey is what an erasure marker is stored under: the first 128 bits
// of SHA-256(id) in hex, so the marker that drops a person's late events
// does not keep their id (or pseudonym) on disk. Reader.Forgotten returns
// these keys.
func ForgetKey(id string) string {
	h := sha256.Sum256([]byte(id))
	return hex.EncodeToString(h[:16])
}

// ReclaimSpace flattens the LSM tree and runs value-log GC until it finds
// nothing to rewrite, so deleted data leaves the disk. It is slow: run it on
// a schedule, not per commit.
func (s *Store) ReclaimSpace() error {
	if err := s.db.Flatten(1); err != nil {
		return fmt.Errorf("state: flatten: %w", err)
	}
	for {
		if err := s.db.RunValueLogGC(0.5); err != nil {
			if errors.Is(err, badger.ErrNoRewrite) || errors.Is(err, badger.ErrRejected) {
				return nil
			}
			return fmt.Errorf("state: value-log gc: %w", err)
		}
	}
}
