package stream

import (
	"context"
	"fmt"
	"reflect"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/pipeline"
)

// TestLiveEqualsReplay: the demo events (with invalid lines mixed in)
// published to the bus and consumed by a worker give exactly the counts and
// every query answer of a replay of the same file (issue 4, "How it must be
// checked").
func TestLiveEqualsReplay(t *testing.T) {
	const days = 6
	input, junk := withJunk(demoInput(t, 1500, days), 400)
	cfg := DefaultConfig()
	b := startBus(t, cfg)
	sent := b.send(t, input)
	if sent.Unparsed != int64(junk) || sent.Stored != sent.Lines || sent.Duplicates != 0 {
		t.Fatalf("send stats %+v: want %d unparsed and every line stored once", sent, junk)
	}
	last := b.lastSeq(t)

	pcfg := processorConfig()
	wantDir, want := replayInto(t, input, pcfg)
	if want.Accepted == 0 || want.RejectedTotal() != uint64(junk) {
		t.Fatalf("replay counts %+v, want %d rejected", want, junk)
	}

	clock := &fakeClock{}
	cfg.Clock = clock.now
	dir := t.TempDir()
	lw := startWorker(t, b, dir, pcfg, cfg, cfg.AllPartitions())
	lw.waitFor(t, 60*time.Second, "every message committed", func(s pipeline.Status) bool { return s.Next > last })
	// Nothing more arrives: let event time pass the lateness so the buffer
	// empties, as the end of a replay drains it.
	clock.advance(time.Hour)
	got := lw.waitFor(t, 30*time.Second, "the buffer to empty", func(s pipeline.Status) bool {
		return s.Buffered == 0 && s.Counts.Accepted == want.Accepted
	})
	lw.stop(t)

	if got.Counts.Accepted != want.Accepted || got.Counts.Duplicate != want.Duplicate || got.Counts.Late != want.Late ||
		!reflect.DeepEqual(got.Counts.Rejected, want.Rejected) {
		t.Errorf("live counts %+v, replay %+v", got.Counts, want)
	}
	from := shop.DefaultConfig().Start
	to := from.Add(days * 24 * time.Hour)
	ga, wa := answersJSON(t, dir, from, to), answersJSON(t, wantDir, from, to)
	if ga != wa {
		t.Errorf("live answers differ from replay %s", firstDifference(ga, wa))
	}
	if !strings.Contains(wa, `"credit/markov/channel"`) || len(wa) < 10000 {
		t.Fatalf("answers look empty: %.300s", wa)
	}
}

// TestDeadLetters: invalid and late events land in TL_DEAD under
// <prefix>.dead.<reason> with the reason, original subject and stream
// sequence in headers and message id dead-<seq>; the processor counts them
// and a valid event is still accepted.
func TestDeadLetters(t *testing.T) {
	cfg := DefaultConfig()
	b := startBus(t, cfg)
	pcfg := processorConfig()
	pcfg.Lateness = time.Minute
	input := strings.Join([]string{
		`{"id":"a1","user":"ann","time":"2026-10-01T12:00:00Z","kind":"action","action":"product_view"}`,
		`{"id":"a2","user":"ann","time":"yesterday","kind":"action","action":"product_view"}`,
		`not json at all`,
		`{"id":"a3","user":"bob","time":"2026-10-01T12:00:00Z","kind":"visit"}`,
		`{"id":"a4","user":"cid","time":"2026-10-01T14:00:00Z","kind":"action","action":"product_view"}`,
		`{"id":"a5","user":"dan","time":"2026-10-01T12:30:00Z","kind":"action","action":"product_view"}`, // late: 90 min behind
	}, "\n")
	sent := b.send(t, []byte(input))
	if sent.Stored != 6 {
		t.Fatalf("stored %d of 6", sent.Stored)
	}
	dir := t.TempDir()
	lw := startWorker(t, b, dir, pcfg, cfg, cfg.AllPartitions())
	st := lw.waitFor(t, 30*time.Second, "all six read", func(s pipeline.Status) bool { return s.Next > 6 })
	lw.stop(t)

	wantRejected := map[event.Reason]uint64{event.ReasonBadTime: 1, event.ReasonBadJSON: 1, event.ReasonBadKind: 1}
	if !reflect.DeepEqual(st.Counts.Rejected, wantRejected) || st.Counts.Late != 1 {
		t.Errorf("counts %+v, want rejected %v and 1 late", st.Counts, wantRejected)
	}
	// Seqs 2, 3, 4 and 6 are dead letters, in that order.
	want := []struct {
		reason event.Reason
		seq    uint64
		kind   string
	}{{event.ReasonBadTime, 2, "action"}, {event.ReasonBadJSON, 3, "action"}, {event.ReasonBadKind, 4, "action"}, {event.ReasonLate, 6, "action"}}
	ctx := context.Background()
	c, err := b.js.OrderedConsumer(ctx, cfg.DeadStream, jetstream.OrderedConsumerConfig{})
	if err != nil {
		t.Fatal(err)
	}
	batch, err := c.Fetch(10, jetstream.FetchMaxWait(time.Second))
	if err != nil {
		t.Fatal(err)
	}
	var got []jetstream.Msg
	for m := range batch.Messages() {
		got = append(got, m)
	}
	if len(got) != len(want) {
		t.Fatalf("got %d dead letters, want %d", len(got), len(want))
	}
	lines := strings.Split(input, "\n")
	for i, w := range want {
		m := got[i]
		h := m.Headers()
		if m.Subject() != "tl.dead."+string(w.reason) || h.Get(HeaderReason) != string(w.reason) ||
			h.Get(HeaderStreamSeq) != strconv.FormatUint(w.seq, 10) || h.Get("Nats-Msg-Id") != fmt.Sprintf("dead-%d", w.seq) {
			t.Errorf("dead letter %d: subject %s headers %v, want reason %s seq %d", i, m.Subject(), h, w.reason, w.seq)
		}
		if sub := h.Get(HeaderSubject); !strings.HasPrefix(sub, "tl.ev.") || !strings.Contains(sub, "."+w.kind+".") {
			t.Errorf("dead letter %d: original subject %q", i, sub)
		}
		if string(m.Data()) != lines[w.seq-1] {
			t.Errorf("dead letter %d: payload %q, want %q", i, m.Data(), lines[w.seq-1])
		}
	}
}

// TestQuietStreamReleasesBuffered: events within the lateness wait in the
// reorder buffer; with no further traffic the worker's Tick lets event time
// follow the wall clock and they become visible (design brief, "Quiet
// partitions").
func TestQuietStreamReleasesBuffered(t *testing.T) {
	cfg := DefaultConfig()
	cfg.TickInterval = 50 * time.Millisecond
	b := startBus(t, cfg)
	pcfg := processorConfig()
	pcfg.Lateness = 2 * time.Second
	pcfg.CommitInterval = 100 * time.Millisecond
	now := time.Now().UTC()
	var lines []string
	for i := range 5 {
		lines = append(lines, fmt.Sprintf(`{"id":"q%d","user":"u%d","time":%q,"kind":"action","action":"product_view"}`,
			i, i, now.Add(time.Duration(i)*time.Millisecond).Format(time.RFC3339Nano)))
	}
	dir := t.TempDir()
	lw := startWorker(t, b, dir, pcfg, cfg, cfg.AllPartitions())
	defer lw.stop(t)
	b.send(t, []byte(strings.Join(lines, "\n")))
	// Committed while still buffered: nothing is accepted yet.
	s := lw.waitFor(t, 10*time.Second, "the five read", func(s pipeline.Status) bool { return s.Next > 5 })
	if s.Counts.Accepted != 0 && time.Since(now) < pcfg.Lateness {
		t.Fatalf("accepted %d before the lateness passed", s.Counts.Accepted)
	}
	start := time.Now()
	lw.waitFor(t, 10*time.Second, "release without traffic", func(s pipeline.Status) bool {
		return s.Counts.Accepted == 5 && s.Buffered == 0
	})
	t.Logf("released %v after the last read (lateness %v)", time.Since(start).Round(time.Millisecond), pcfg.Lateness)
}
