package state

import (
	"context"
	"testing"
	"time"

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
			Meta: map[string][]byte{MetaWatermark: EncodeWatermark(base.UnixNano(), 0)}}); err != nil {
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
