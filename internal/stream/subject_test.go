package stream

import (
	"context"
	"strconv"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/pipeline"
)

// TestCheckedSubjects (issue 9 item 7): the worker verifies that a
// message's subject fits its event. The cases the issue found accepted on
// the old code: a user key of zeros, a key that is not hex, a subject
// saying action for a touch, and a publication straight to the events
// subjects with the user's key under another partition. Each is a dead
// letter with reason bad_subject; the one correct message is accepted
// (buffered within the lateness).
func TestCheckedSubjects(t *testing.T) {
	cfg := DefaultConfig()
	b := startBus(t, cfg)
	user := "ann"
	key := UserKey(user)
	right := PartitionOf(user, cfg.Partitions)
	other := (right + 3) % cfg.Partitions
	touch := `{"id":"t1","user":"ann","time":"2026-10-01T10:00:00Z","kind":"touch","channel":"email"}`
	act := func(id string) string {
		return `{"id":"` + id + `","user":"ann","time":"2026-10-01T10:01:00Z","kind":"action","action":"x"}`
	}
	pubs := []struct {
		subject, data string
	}{
		{"tl.in.action.0000000000000000", act("a1")},
		{"tl.in.action.not-a-hex-key", act("a2")},
		{"tl.in.action." + key, touch},
		{"tl.ev." + strconv.Itoa(other) + ".action." + key, act("a3")},
		{"tl.in.touch." + key, touch}, // correct
	}
	ctx := context.Background()
	for _, p := range pubs {
		if _, err := b.js.PublishMsg(ctx, &nats.Msg{Subject: p.subject, Data: []byte(p.data)}); err != nil {
			t.Fatalf("%s: %v", p.subject, err)
		}
	}
	lw := startWorker(t, b, t.TempDir(), processorConfig(), cfg, cfg.AllPartitions())
	s := lw.waitFor(t, 10*time.Second, "five messages", func(s pipeline.Status) bool { return s.Next > 5 })
	lw.stop(t)
	if s.Counts.Accepted+uint64(s.Buffered) != 1 || s.Counts.Rejected[event.ReasonBadSubject] != 4 {
		t.Errorf("counts %+v, %d buffered: want 1 accepted or buffered, 4 bad_subject", s.Counts, s.Buffered)
	}
	dead, err := b.js.Stream(ctx, cfg.DeadStream)
	if err != nil {
		t.Fatal(err)
	}
	c, err := dead.OrderedConsumer(ctx, jetstream.OrderedConsumerConfig{})
	if err != nil {
		t.Fatal(err)
	}
	batch, err := c.Fetch(10, jetstream.FetchMaxWait(time.Second))
	if err != nil {
		t.Fatal(err)
	}
	n := 0
	for m := range batch.Messages() {
		n++
		if m.Subject() != "tl.dead.bad_subject" || m.Headers().Get(HeaderReason) != "bad_subject" {
			t.Errorf("dead letter on %s, reason %q", m.Subject(), m.Headers().Get(HeaderReason))
		}
	}
	if n != 4 {
		t.Errorf("%d dead letters, want 4", n)
	}
}
