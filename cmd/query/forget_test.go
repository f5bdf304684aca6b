package main

import (
	"bytes"
	"context"
	"encoding/json"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/state"
	"github.com/touchledger/touchledger/internal/stream"
)

// liveWorker is an in-process worker of a partition range serving erasure
// requests.
type liveWorker struct {
	w      *stream.Worker
	st     *state.Store
	p      *pipeline.Processor
	sub    *nats.Subscription
	cancel context.CancelFunc
	done   chan error
}

func startLiveWorker(t *testing.T, js jetstream.JetStream, cfg stream.Config, parts stream.Partitions) *liveWorker {
	t.Helper()
	w, err := stream.NewWorker(js, cfg, parts, nil)
	if err != nil {
		t.Fatal(err)
	}
	st, err := state.Open(context.Background(), pipeline.StoreOptions(t.TempDir(), config.Default()))
	if err != nil {
		t.Fatal(err)
	}
	p, err := pipeline.New(st, w.ProcessorConfig(pipeline.FromConfig(config.Default())), w.DeadLetters(), nil)
	if err != nil {
		t.Fatal(err)
	}
	sub, err := w.ServeAdmin(js.Conn(), nil)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	lw := &liveWorker{w: w, st: st, p: p, sub: sub, cancel: cancel, done: make(chan error, 1)}
	go func() { lw.done <- w.Run(ctx, p) }()
	return lw
}

func (lw *liveWorker) stop(t *testing.T) {
	t.Helper()
	if lw.st == nil {
		return
	}
	lw.sub.Unsubscribe()
	lw.cancel()
	err := <-lw.done
	lw.p.Close()
	lw.st.Close()
	lw.st = nil
	if err != nil {
		t.Fatal(err)
	}
}

// TestForgetOverNATS: query forget --nats reaches both workers; the owner
// of the person's partition deletes their state and purges their messages,
// the other has nothing of them; with one worker stopped the answer names
// its partitions and the command fails.
func TestForgetOverNATS(t *testing.T) {
	scfg := stream.DefaultConfig()
	srv, url, err := stream.StartEmbedded(t.TempDir(), stream.EmbedPort(0), stream.EmbedConfig(scfg))
	if err != nil {
		t.Fatal(err)
	}
	defer func() { srv.Shutdown(); srv.WaitForShutdown() }()
	nc, err := nats.Connect(url)
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	js, err := jetstream.New(nc)
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	if err := stream.EnsureStream(ctx, js, scfg); err != nil {
		t.Fatal(err)
	}
	c := shop.DefaultConfig()
	c.Visitors, c.Days, c.ShiftDay, c.IncidentDay = 200, 2, 1, 1
	var buf bytes.Buffer
	if _, err := shop.Generate(&buf, c); err != nil {
		t.Fatal(err)
	}
	input := buf.String()
	if _, err := stream.Send(ctx, js, strings.NewReader(input), stream.SendOptions{}); err != nil {
		t.Fatal(err)
	}
	counts := map[string]int{}
	for _, m := range regexp.MustCompile(`"user":"([^"]+)"`).FindAllStringSubmatch(input, -1) {
		counts[m[1]]++
	}
	var victim string
	for u, n := range counts {
		if n > counts[victim] || (n == counts[victim] && u < victim) {
			victim = u
		}
	}
	owner := stream.PartitionOf(victim, scfg.Partitions) / 8 // 0: the worker of 0-7, 1: of 8-15
	workers := []*liveWorker{
		startLiveWorker(t, js, scfg, stream.Partitions{First: 0, Last: 7}),
		startLiveWorker(t, js, scfg, stream.Partitions{First: 8, Last: 15}),
	}
	defer workers[0].stop(t)
	defer workers[1].stop(t)
	// Both workers have committed and acknowledged everything.
	deadline := time.Now().Add(30 * time.Second)
	for _, lw := range workers {
		for {
			cons, err := js.Consumer(ctx, scfg.Stream, lw.w.Consumer())
			if err == nil {
				if i := cons.CachedInfo(); i.NumPending == 0 && i.NumAckPending == 0 && i.AckFloor.Stream > 0 {
					break
				}
			}
			if time.Now().After(deadline) {
				t.Fatalf("worker %s did not catch up", lw.w.Partitions())
			}
			time.Sleep(20 * time.Millisecond)
		}
	}

	code, out, errOut := runCLI("forget", "--nats", url, "--user", victim, "--format", "json")
	if code != 0 {
		t.Fatalf("forget: exit %d\n%s\n%s", code, out, errOut)
	}
	var a struct {
		Replies []struct {
			User       string `json:"user"`
			HadState   bool   `json:"had_state"`
			Partitions string `json:"partitions"`
			Owner      bool   `json:"owner"`
			Purged     int    `json:"purged"`
			Error      string `json:"error"`
		} `json:"replies"`
		Missing []int `json:"missing_partitions"`
	}
	if err := json.Unmarshal([]byte(out), &a); err != nil {
		t.Fatalf("%v:\n%s", err, out)
	}
	if len(a.Replies) != 2 || a.Missing != nil {
		t.Fatalf("replies %+v, missing %v: want one per worker", a.Replies, a.Missing)
	}
	for _, r := range a.Replies {
		isOwner := r.Partitions == []string{"0-7", "8-15"}[owner]
		want := struct {
			hadState, owner bool
			purged          int
		}{isOwner, isOwner, 0}
		if isOwner {
			want.purged = counts[victim]
		}
		if r.User != victim || r.Error != "" || r.HadState != want.hadState || r.Owner != want.owner || r.Purged != want.purged {
			t.Errorf("reply of %s: %+v, want had_state %v owner %v purged %d", r.Partitions, r, want.hadState, want.owner, want.purged)
		}
	}
	rd := workers[owner].st.NewReader()
	if b, err := rd.User(victim); err != nil || b != nil {
		t.Errorf("the owner still holds the victim's state (%v)", err)
	}
	rd.Discard()

	// The table form says what each worker did.
	code, out, _ = runCLI("forget", "--nats", url, "--user", victim)
	if code != 0 || !strings.Contains(out, "partitions 0-7: forgot "+victim) || !strings.Contains(out, "partitions 8-15: forgot "+victim) ||
		!strings.Contains(out, "0 messages purged from the stream (tl.ev.*.*."+stream.UserKey(victim)+")") {
		t.Errorf("forget again: exit %d\n%s", code, out)
	}

	// One worker stopped: its partitions are named and the command fails.
	workers[1].stop(t)
	code, out, errOut = runCLI("forget", "--nats", url, "--user", victim, "--timeout", "500ms")
	if code != 1 || !strings.Contains(errOut, "partial answer: partitions 8-15 did not answer") || !strings.Contains(out, "partitions 0-7: forgot") {
		t.Errorf("forget with a worker stopped: exit %d\n%s\n%s", code, out, errOut)
	}
}
