package state

import (
	"context"
	"errors"
	"os"
	"strings"
	"testing"
	"time"

	"github.com/dgraph-io/badger/v4"

	"github.com/touchledger/touchledger/internal/tally"
)

// TestCommitFansOutToResolutions: one commit adds each delta to the bucket of
// every resolution; a second commit adds to the stored tables; the sums over
// any resolution agree (tally invariant: additivity across buckets).
func TestCommitFansOutToResolutions(t *testing.T) {
	ctx := context.Background()
	s, err := Open(ctx, DefaultOptions(t.TempDir()))
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	base := time.Date(2026, 10, 1, 0, 0, 0, 0, time.UTC)
	for round := 0; round < 2; round++ {
		b := tally.NewBatch(300)
		for i := 0; i < 48; i++ {
			b.Add(tally.Credit, base.Add(time.Duration(i)*37*time.Minute).UnixNano(), tally.Join("linear", "mail", ""), tally.Vec{1, 10, 0})
		}
		if _, err := s.Commit(ctx, &Commit{Counters: b, Users: map[string][]byte{"u1": {1, 2, 3}},
			Meta: Meta{Watermark: &Watermark{MaxSeen: base.UnixNano()}}}); err != nil {
			t.Fatal(err)
		}
	}
	r := s.NewReader()
	defer r.Discard()
	for res := range s.Resolutions() {
		tb := make(tally.Table)
		if err := r.Sum(res, tally.Credit, base.Unix(), base.Add(72*time.Hour).Unix(), tb); err != nil {
			t.Fatal(err)
		}
		if got, want := tb[tally.Join("linear", "mail", "")], (tally.Vec{96, 960, 0}); got != want {
			t.Errorf("resolution %d: sum = %v, want %v", res, got, want)
		}
	}
	u, err := r.User("u1")
	if err != nil || string(u) != "\x01\x02\x03" {
		t.Errorf("user = %v, %v", u, err)
	}
	if m, _, ok, err := r.Watermark(); err != nil || !ok || m != base.UnixNano() {
		t.Errorf("watermark = %d %v %v", m, ok, err)
	}
}

// TestOtherResolutionsRefused: a directory keeps the resolutions it was made with.
func TestOtherResolutionsRefused(t *testing.T) {
	dir := t.TempDir()
	s, err := Open(context.Background(), DefaultOptions(dir))
	if err != nil {
		t.Fatal(err)
	}
	s.Close()
	o := DefaultOptions(dir)
	o.Resolutions[0].Step = time.Minute
	if s, err := Open(context.Background(), o); err == nil {
		s.Close()
		t.Fatal("opened with other resolutions")
	}
}

// TestOldFormatRefused (issue 11): a directory written by format version 1
// (before the state names changed) is refused with ErrFormat and a message
// naming both versions, and is left as it was.
func TestOldFormatRefused(t *testing.T) {
	dir := t.TempDir()
	o := DefaultOptions(dir)
	raw, err := openRaw(o)
	if err != nil {
		t.Fatal(err)
	}
	old := encodeResolutions(o.Resolutions)
	old[0] = 1
	if err := raw.db.Update(func(txn *badger.Txn) error { return txn.Set(metaKey("format"), old) }); err != nil {
		t.Fatal(err)
	}
	raw.db.Close()

	s, err := Open(context.Background(), o)
	if err == nil {
		s.Close()
		t.Fatal("opened a format 1 directory")
	}
	if !errors.Is(err, ErrFormat) {
		t.Errorf("error %v is not ErrFormat", err)
	}
	if msg := err.Error(); !strings.Contains(msg, "holds store format 1, this build reads format 2") || !strings.Contains(msg, "new directory") {
		t.Errorf("error %q does not name both versions and the way out", msg)
	}
	// Other resolutions on a current-format directory are not a format error.
	dir2 := t.TempDir()
	s, err = Open(context.Background(), DefaultOptions(dir2))
	if err != nil {
		t.Fatal(err)
	}
	s.Close()
	o2 := DefaultOptions(dir2)
	o2.Resolutions[0].Step = time.Minute
	if _, err := Open(context.Background(), o2); err == nil || errors.Is(err, ErrFormat) {
		t.Errorf("other resolutions: error %v, want a resolutions error that is not ErrFormat", err)
	}
}

// TestPrune (issue 6): with a short retention, buckets older than it are
// deleted; younger ones and the forever-kept resolution stay.
func TestPrune(t *testing.T) {
	ctx := context.Background()
	o := DefaultOptions(t.TempDir())
	o.Resolutions[0].Retention = 24 * time.Hour // 5m kept one day
	o.Resolutions[1].Retention = 48 * time.Hour // hours kept two days
	s, err := Open(ctx, o)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	base := time.Date(2026, 10, 1, 0, 0, 0, 0, time.UTC)
	b := tally.NewBatch(300)
	for d := 0; d < 5; d++ {
		b.Add(tally.Totals, base.Add(time.Duration(d)*24*time.Hour).UnixNano(), "", tally.Vec{1, 0, 0})
	}
	if _, err := s.Commit(ctx, &Commit{Counters: b}); err != nil {
		t.Fatal(err)
	}
	latest := base.Add(4*24*time.Hour + time.Hour).UnixNano()
	// A limited call drops the oldest first and says more are left.
	rep, err := s.Prune(ctx, latest, 2)
	if err != nil || rep.Buckets != 2 || !rep.More {
		t.Fatalf("limited prune: %+v, %v; want 2 buckets and more left", rep, err)
	}
	rest, err := s.Prune(ctx, latest, 0)
	if err != nil {
		t.Fatal(err)
	}
	rep.Buckets += rest.Buckets
	// 5m buckets at days 0..3 are older than one day before latest (4);
	// hour buckets at days 0..2 are older than two days (3).
	if rep.Buckets != 7 {
		t.Errorf("dropped %d buckets, want 7", rep.Buckets)
	}
	r := s.NewReader()
	defer r.Discard()
	count := func(res int) int {
		n := 0
		r.Buckets(res, tally.Totals, 0, latest/1e9+1, func(int64, tally.Table) error { n++; return nil })
		return n
	}
	if got := []int{count(0), count(1), count(2)}; got[0] != 1 || got[1] != 2 || got[2] != 5 {
		t.Errorf("buckets left per resolution = %v, want [1 2 5]", got)
	}
	if err := s.ReclaimSpace(); err != nil {
		t.Fatal(err)
	}
}

// TestPruneFreesDisk (issue 6): expired buckets really leave the disk — the
// store's files shrink after pruning and reclaiming.
func TestPruneFreesDisk(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	o := DefaultOptions(dir)
	o.Resolutions[0].Retention = 24 * time.Hour
	o.Resolutions[1].Retention = 24 * time.Hour
	s, err := Open(ctx, o)
	if err != nil {
		t.Fatal(err)
	}
	base := time.Date(2026, 10, 1, 0, 0, 0, 0, time.UTC)
	for d := 0; d < 20; d++ { // 20 days of 5-minute buckets with wide tables
		b := tally.NewBatch(300)
		for m := 0; m < 288; m++ {
			at := base.Add(time.Duration(d)*24*time.Hour + time.Duration(m)*5*time.Minute).UnixNano()
			for c := 0; c < 20; c++ {
				b.Add(tally.Credit, at, tally.Join("linear", "channel-number-"+string(rune('a'+c)), "some-campaign"), tally.Vec{1, 2, 3})
			}
		}
		if _, err := s.Commit(ctx, &Commit{Counters: b}); err != nil {
			t.Fatal(err)
		}
	}
	s.Close() // flush every memtable into tables
	if s, err = Open(ctx, o); err != nil {
		t.Fatal(err)
	}
	if err := s.ReclaimSpace(); err != nil {
		t.Fatal(err)
	}
	before := dirSize(t, dir)
	if _, err := s.Prune(ctx, base.Add(20*24*time.Hour).UnixNano(), 0); err != nil {
		t.Fatal(err)
	}
	if err := s.ReclaimSpace(); err != nil {
		t.Fatal(err)
	}
	s.Close()
	after := dirSize(t, dir)
	if before == 0 {
		t.Fatal("no table files before pruning: the test measures nothing")
	}
	t.Logf("store files: %d bytes before pruning, %d after", before, after)
	if after >= before*3/4 {
		t.Errorf("disk use %d → %d bytes: expired buckets did not leave the disk", before, after)
	}
}

func dirSize(t *testing.T, dir string) int64 {
	var n int64
	entries, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	for _, e := range entries {
		if strings.HasSuffix(e.Name(), ".sst") { // values are kept in the tables (below Badger's value threshold)
			if fi, err := e.Info(); err == nil {
				n += fi.Size()
			}
		}
	}
	return n
}
