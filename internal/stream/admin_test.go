package stream

import (
	"context"
	"encoding/json"
	"fmt"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/pipeline"
)

// TestForgetOnLiveWorker (issue 6, erasure): a person's events are
// committed by a running worker; an erasure request over NATS deletes their
// state and purges their messages from the stream; events for them that
// arrive afterwards inside the lateness are dropped and do not recreate the
// state; every aggregate answer (all users) stays the same.
func TestForgetOnLiveWorker(t *testing.T) {
	const days = 3
	input := demoInput(t, 300, days)
	victim, nVictim := busiestUser(string(input))
	cfg := DefaultConfig()
	b := startBus(t, cfg)
	clock := &fakeClock{}
	cfg.Clock = clock.now
	dir := t.TempDir()
	lw := startWorker(t, b, dir, processorConfig(), cfg, cfg.AllPartitions())
	stopped := false
	defer func() {
		if !stopped {
			lw.stop(t)
		}
	}()
	sub, err := lw.w.ServeAdmin(b.nc, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer sub.Unsubscribe()

	b.send(t, input)
	last := b.lastSeq(t)
	lw.waitFor(t, 30*time.Second, "every message read", func(s pipeline.Status) bool { return s.Next > last })
	clock.advance(time.Hour) // past the lateness: the buffer empties
	lw.waitFor(t, 30*time.Second, "the buffer to empty", func(s pipeline.Status) bool { return s.Buffered == 0 })

	// The victim's messages sit in the partition PartitionOf names (checked
	// against the server's mapping).
	ctx := context.Background()
	events, err := b.js.Stream(ctx, cfg.Stream)
	if err != nil {
		t.Fatal(err)
	}
	subjects := func() map[string]uint64 {
		info, err := events.Info(ctx, jetstream.WithSubjectFilter(cfg.UserFilter(victim)))
		if err != nil {
			t.Fatal(err)
		}
		return info.State.Subjects
	}
	var stored uint64
	for subj, n := range subjects() {
		stored += n
		if want := fmt.Sprintf("tl.ev.%d.", PartitionOf(victim, cfg.Partitions)); !strings.HasPrefix(subj, want) {
			t.Errorf("victim's subject %s, want partition prefix %s", subj, want)
		}
	}
	if stored != uint64(nVictim) {
		t.Fatalf("the stream holds %d of the victim's messages, want %d", stored, nVictim)
	}
	from := shop.DefaultConfig().Start
	to := from.Add(days * 24 * time.Hour)
	before := storeAnswers(t, lw.st, from, to)
	if !hasUser(t, lw, victim) {
		t.Fatal("the victim has no stored state before the erasure: the test proves nothing")
	}

	// Malformed requests are refused with a reason.
	for _, tt := range []struct{ body, want string }{
		{`{}`, "user is empty"},
		{`not json`, "forget request"},
		{`{"user":"` + strings.Repeat("x", maxForgetUser+1) + `"}`, "at most"},
	} {
		rep := forgetOver(t, b, []byte(tt.body))
		if !strings.Contains(rep.Error, tt.want) || rep.ForgetReport != nil {
			t.Errorf("request %.40q: reply %+v, want an error containing %q", tt.body, rep, tt.want)
		}
	}

	body, _ := json.Marshal(ForgetRequest{User: victim})
	t0 := time.Now()
	rep := forgetOver(t, b, body)
	t.Logf("erasure of a user with %d events: answered in %v (state deleted in a commit, %d messages purged)",
		nVictim, time.Since(t0).Round(time.Millisecond), rep.Purged)
	if rep.Error != "" || rep.ForgetReport == nil {
		t.Fatalf("forget reply %+v", rep)
	}
	if !rep.HadState || rep.User != victim || !rep.Owner || rep.Partitions != "0-15" ||
		rep.Purged != uint64(nVictim) || rep.PurgeFilter != "tl.ev.*.*."+UserKey(victim) {
		t.Errorf("forget reply %+v: want had_state, owner, purged %d", rep, nVictim)
	}
	if left := subjects(); len(left) != 0 {
		t.Errorf("victim's messages left in the stream: %v", left)
	}
	if hasUser(t, lw, victim) {
		t.Error("the victim's state is still stored right after the erasure")
	}

	// Late copies: new events for the victim just after the watermark (not
	// late: quiet input moved the watermark past the latest event), one of
	// each kind; they are dropped when released.
	at := lw.p.Status().Watermark.Add(time.Minute).Format(time.RFC3339Nano)
	late := fmt.Sprintf(`{"id":"after-1","user":%q,"time":%q,"kind":"touch","channel":"newsletter"}`+"\n"+
		`{"id":"after-2","user":%q,"time":%q,"kind":"action","action":"product_view"}`+"\n", victim, at, victim, at)
	b.send(t, []byte(late))
	last = b.lastSeq(t)
	lw.waitFor(t, 30*time.Second, "the late copies read", func(s pipeline.Status) bool { return s.Next > last })
	clock.advance(time.Hour)
	st := lw.waitFor(t, 30*time.Second, "the late copies released", func(s pipeline.Status) bool {
		return s.Buffered == 0 && s.Counts.Erased == 2
	})
	if after := storeAnswers(t, lw.st, from, to); after != before {
		t.Errorf("aggregate answers changed by the erasure %s", firstDifference(after, before))
	}
	accepted := st.Counts.Accepted
	lw.stop(t)
	stopped = true

	// After the worker stopped: no key of the victim, scanning every user.
	store := openStore(t, dir)
	defer store.Close()
	r := store.NewReader()
	defer r.Discard()
	users := 0
	if err := r.Users(func(id string) error {
		users++
		if id == victim {
			t.Errorf("user %q still stored", id)
		}
		return nil
	}); err != nil {
		t.Fatal(err)
	}
	if users == 0 || accepted == 0 {
		t.Fatalf("%d users stored, %d accepted: the scan proves nothing", users, accepted)
	}
	if _, err := lw.w.Forget(ctx, victim); err != ErrWorkerStopped {
		t.Errorf("Forget after Run ended: %v, want ErrWorkerStopped", err)
	}
}

func forgetOver(t *testing.T, b *bus, body []byte) ForgetReply {
	t.Helper()
	m, err := b.nc.Request(ForgetSubject(b.cfg.Prefix), body, 20*time.Second)
	if err != nil {
		t.Fatal(err)
	}
	var rep ForgetReply
	if err := json.Unmarshal(m.Data, &rep); err != nil {
		t.Fatalf("reply %s: %v", m.Data, err)
	}
	return rep
}

// hasUser reports whether the live worker's store holds state for id.
func hasUser(t *testing.T, lw *liveWorker, id string) bool {
	t.Helper()
	r := lw.st.NewReader()
	defer r.Discard()
	v, err := r.User(id)
	if err != nil {
		t.Fatal(err)
	}
	return v != nil
}

// busiestUser returns the user with the most lines in a JSON-lines input.
func busiestUser(input string) (string, int) {
	n := map[string]int{}
	for _, m := range regexp.MustCompile(`"user":"([^"]+)"`).FindAllStringSubmatch(input, -1) {
		n[m[1]]++
	}
	best := ""
	for u, c := range n {
		if c > n[best] || (c == n[best] && u < best) {
			best = u
		}
	}
	return best, n[best]
}

// TestPartitionOf checks PartitionOf against the worked example of
// deploy/nats/README.md ([computed] there with Go's hash/fnv and checked
// against nats-server's mapping by deploy_test.go).
func TestPartitionOf(t *testing.T) {
	tests := []struct {
		user string
		n    int
		key  string
		want int
	}{
		{"shopper-1", 16, "86d32d48dd04ae81", 9},
		{"shopper-1", 1, "86d32d48dd04ae81", 0},
	}
	for _, tt := range tests {
		if got := UserKey(tt.user); got != tt.key {
			t.Errorf("UserKey(%q) = %s, want %s", tt.user, got, tt.key)
		}
		if got := PartitionOf(tt.user, tt.n); got != tt.want {
			t.Errorf("PartitionOf(%q, %d) = %d, want %d", tt.user, tt.n, got, tt.want)
		}
	}
}
