package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"math/rand"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/credit"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/state"
	"github.com/touchledger/touchledger/internal/stream"
)

// TestLiveKillExactlyOnce runs the live worker as a child process against a
// NATS server owned by the test (so the bus outlives every kill), kills it
// with SIGKILL at random moments at least ten times while events flow in
// slices, re-publishes events both inside the stream's de-duplication
// window (the stream drops them) and outside it (the worker's per-user
// de-duplication must catch them), restarts it each time, and checks that
// accepted = unique valid events, every invalid line is one dead letter,
// and every query answer equals a clean replay (issue 4, "Exactly-once
// under faults").
func TestLiveKillExactlyOnce(t *testing.T) {
	visitors, days, slices, minKills := 16000, 8, 10, 12
	if testing.Short() {
		visitors, days, slices, minKills = 5000, 5, 6, 10
	}
	bin := buildIngest(t)
	const window = time.Second // the stream's de-duplication window in this test

	// The input: demo events with invalid lines mixed in, in slices.
	c := shop.DefaultConfig()
	c.Visitors, c.Days, c.ShiftDay, c.IncidentDay = visitors, days, days/2, days-1
	var buf bytes.Buffer
	if _, err := shop.Generate(&buf, c); err != nil {
		t.Fatal(err)
	}
	var lines []string
	junk := 0
	for i, l := range strings.Split(strings.TrimSpace(buf.String()), "\n") {
		lines = append(lines, l)
		if i%997 == 0 {
			lines = append(lines, fmt.Sprintf(`{"id":"junk-%d","user":"j%d","time":"soon","kind":"action","action":"product_view"}`, i, i))
			junk++
		}
	}
	input := []byte(strings.Join(lines, "\n") + "\n")
	cfgFile := filepath.Join(t.TempDir(), "tl.yaml")
	// A short lateness lets the wall clock release the last events quickly;
	// small commits put many commits (and kills between them) in the run.
	cfgYAML := "lateness: 3s\nstore:\n  commit_events: 2000\n  commit_interval: 200ms\n"
	if err := os.WriteFile(cfgFile, []byte(cfgYAML), 0o644); err != nil {
		t.Fatal(err)
	}
	fcfg, err := config.Load(cfgFile)
	if err != nil {
		t.Fatal(err)
	}

	// The bus, owned by the test.
	scfg := stream.DefaultConfig()
	scfg.Duplicates = window
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

	// Publisher: slice after slice; after each, some of its lines again at
	// once (inside the window) and some lines of the slice before last
	// (published more than the window ago). The last slice is published
	// once the final run has started, so that run consumes live input too.
	per := (len(lines) + slices - 1) / slices
	var parts [][]string
	for i := 0; i < len(lines); i += per {
		parts = append(parts, lines[i:min(i+per, len(lines))])
	}
	var pubErr error
	var outside, inside int64
	publish := func(i int) {
		send := func(ls []string) stream.SendStats {
			st, err := stream.Send(ctx, js, strings.NewReader(strings.Join(ls, "\n")), stream.SendOptions{})
			if err != nil && pubErr == nil {
				pubErr = err
			}
			return st
		}
		send(parts[i])
		inside += send(valid(parts[i][:40])).Duplicates
		if i >= 2 {
			outside += send(valid(parts[i-2][len(parts[i-2])/2:][:60])).Stored
		}
	}
	published := make(chan struct{})
	go func() {
		defer close(published)
		for i := range len(parts) - 1 {
			publish(i)
			time.Sleep(window + 200*time.Millisecond)
		}
	}()

	dir := t.TempDir()
	var stderr lockedBuffer
	start := func() *exec.Cmd {
		cmd := exec.Command(bin, "--data", dir, "--nats", url, "--config", cfgFile, "--http", "off",
			"--dedup-window", window.String(), "--watchdog", "5s")
		cmd.Stdout = &stderr
		cmd.Stderr = &stderr
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		return cmd
	}
	rng := rand.New(rand.NewSource(4))
	kills := 0
	for done := false; !done || kills < minKills; {
		select {
		case <-published:
			done = true
		default:
		}
		cmd := start()
		time.Sleep(time.Duration(100+rng.Intn(800)) * time.Millisecond)
		cmd.Process.Signal(syscall.SIGKILL)
		err := cmd.Wait()
		if ee, ok := err.(*exec.ExitError); !ok || !ee.ProcessState.Sys().(syscall.WaitStatus).Signaled() {
			t.Fatalf("worker ended before the kill (%v):\n%s", err, stderr.String())
		}
		kills++
	}
	if pubErr != nil {
		t.Fatal(pubErr)
	}
	// The last run: until every message is committed and acknowledged,
	// then past the lateness so the wall clock releases the buffer, then a
	// graceful stop.
	cmd := start()
	publish(len(parts) - 1)
	if pubErr != nil {
		t.Fatal(pubErr)
	}
	deadline := time.Now().Add(60 * time.Second)
	for {
		cons, err := js.Consumer(ctx, scfg.Stream, stream.ConsumerName(scfg.AllPartitions()))
		if err == nil {
			if info := cons.CachedInfo(); info.NumPending == 0 && info.NumAckPending == 0 && info.AckFloor.Stream > 0 {
				break
			}
		}
		if time.Now().After(deadline) {
			cmd.Process.Kill()
			t.Fatalf("worker did not catch up:\n%s", stderr.String())
		}
		time.Sleep(50 * time.Millisecond)
	}
	time.Sleep(fcfg.Lateness.D() + time.Second)
	cmd.Process.Signal(syscall.SIGTERM)
	if err := cmd.Wait(); err != nil {
		t.Fatalf("graceful stop: %v\n%s", err, stderr.String())
	}
	t.Logf("killed %d times; re-published %d inside the window (dropped by the stream), %d outside", kills, inside, outside)
	if outside == 0 || inside == 0 {
		t.Fatalf("duplicates not exercised: %d inside, %d outside the window", inside, outside)
	}

	// Counts: every valid event once, the late-arriving copies counted as
	// duplicates, every invalid line once.
	cp := checkpointOf(t, dir, scfg.SourceName(scfg.AllPartitions()))
	unique := uint64(len(lines) - junk)
	if n := pendingOf(t, dir, scfg.SourceName(scfg.AllPartitions())); n > 0 {
		t.Errorf("%d events still buffered in the store after the lateness passed", n)
	}
	if cp.Counts.Accepted != unique || cp.Counts.RejectedTotal() != uint64(junk) || cp.Counts.Late != 0 {
		t.Errorf("counts %+v: want accepted %d, rejected %d, late 0", cp.Counts, unique, junk)
	}
	if cp.Counts.Duplicate < uint64(outside) {
		t.Errorf("duplicates %d, want at least the %d published outside the window", cp.Counts.Duplicate, outside)
	}
	dead, err := js.Stream(ctx, scfg.DeadStream)
	if err != nil {
		t.Fatal(err)
	}
	if n := dead.CachedInfo().State.Msgs; n != uint64(junk) {
		t.Errorf("dead letters %d, want %d (one per invalid line)", n, junk)
	}

	// Every answer equals a clean replay of the input.
	clean := t.TempDir()
	replayClean(t, clean, fcfg, input)
	from := c.Start
	to := from.Add(time.Duration(days) * 24 * time.Hour)
	got, want := allAnswers(t, dir, fcfg, from, to), allAnswers(t, clean, fcfg, from, to)
	if got != want {
		i := 0
		for i < len(got) && i < len(want) && got[i] == want[i] {
			i++
		}
		lo := max(0, i-100)
		t.Errorf("answers after kills differ from a clean replay at byte %d:\n got …%.300s\nwant …%.300s", i, got[lo:], want[lo:])
	}
}

// valid keeps the lines that are events (not the junk).
func valid(ls []string) []string {
	var out []string
	for _, l := range ls {
		if !strings.Contains(l, `"junk-`) {
			out = append(out, l)
		}
	}
	return out
}

type lockedBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (l *lockedBuffer) Write(p []byte) (int, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.Write(p)
}

func (l *lockedBuffer) String() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	s := l.b.String()
	if len(s) > 8000 {
		s = "…" + s[len(s)-8000:]
	}
	return s
}

func checkpointOf(t *testing.T, dir, source string) pipeline.Checkpoint {
	t.Helper()
	st, err := state.Open(context.Background(), pipeline.StoreOptions(dir, config.Default()))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	r := st.NewReader()
	defer r.Discard()
	b, err := r.Checkpoint(source)
	if err != nil || b == nil {
		t.Fatalf("checkpoint of %s: %v (found %v)", source, err, b != nil)
	}
	var cp pipeline.Checkpoint
	if err := cp.UnmarshalBinary(b); err != nil {
		t.Fatal(err)
	}
	return cp
}

func pendingOf(t *testing.T, dir, source string) int {
	t.Helper()
	st, err := state.Open(context.Background(), pipeline.StoreOptions(dir, config.Default()))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	r := st.NewReader()
	defer r.Discard()
	n := 0
	if err := r.Pending(source, func(uint64, []byte) error { n++; return nil }); err != nil {
		t.Fatal(err)
	}
	return n
}

func replayClean(t *testing.T, dir string, cfg config.Config, input []byte) {
	t.Helper()
	ctx := context.Background()
	st, err := state.Open(ctx, pipeline.StoreOptions(dir, cfg))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	p, err := pipeline.New(st, pipeline.FromConfig(cfg), nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	_, err = pipeline.Replay(ctx, p, "clean", bytes.NewReader(input), cfg.Limits.MaxPayload)
	if cerr := p.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		t.Fatal(err)
	}
}

// allAnswers is every query answer over [from, to) as JSON: credit under
// every model, transitions and paths at both levels, the funnel, alerts.
func allAnswers(t *testing.T, dir string, cfg config.Config, from, to time.Time) string {
	t.Helper()
	st, err := state.Open(context.Background(), pipeline.StoreOptions(dir, cfg))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	q, err := query.NewQuerier(st, query.ParamsFrom(cfg))
	if err != nil {
		t.Fatal(err)
	}
	defer q.Close()
	span := query.Span{From: from, To: to}
	out := map[string]any{}
	models := []string{query.ModelMarkov, query.ModelShapley}
	for _, m := range credit.RuleModels {
		models = append(models, m.String())
	}
	for _, m := range models {
		a, err := q.Credit(m, query.ByChannel, 0, span)
		if err != nil {
			t.Fatalf("credit %s: %v", m, err)
		}
		out["credit/"+m] = a
	}
	for _, level := range []string{"channel", "action"} {
		tr, err := q.Transitions(level, 1, span)
		if err != nil {
			t.Fatal(err)
		}
		out["transitions/"+level] = tr
		pa, err := q.Paths(level, 20, span)
		if err != nil {
			t.Fatal(err)
		}
		out["paths/"+level] = pa
	}
	fu, err := q.Funnel(span)
	if err != nil {
		t.Fatal(err)
	}
	out["funnel"] = fu
	al, err := q.Alerts(span, true)
	if err != nil {
		t.Fatal(err)
	}
	out["alerts"] = al
	b, err := json.Marshal(out)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

// TestEmbeddedKillOrderedSend is the nemesis test of the default
// one-machine topology (issue 9, item 1): the worker hosts the embedded
// NATS server, so every kill -9 takes the bus down with it while `ingest
// send` processes publish slices of the input, re-publish some lines at
// once (inside the stream's de-duplication window) and lines of the slice
// before last (outside it). The worker is killed at random moments at
// least ten times and restarted on the same port; the senders reconnect
// and re-publish from their oldest unacknowledged line in order. Then
// nothing may be late, every unique valid event is accepted once, every
// invalid line is one dead letter, and every answer equals a clean replay.
// On the old sender (failed publications re-sent behind newer ones) the
// re-sent events arrived behind the watermark and were rejected as late.
func TestEmbeddedKillOrderedSend(t *testing.T) {
	visitors, days, slices, minKills, rate := 8000, 6, 8, 14, "3000"
	if testing.Short() {
		visitors, days, slices, minKills, rate = 3000, 4, 5, 10, "2000"
	}
	bin := buildIngest(t)
	const window = time.Second // the stream's de-duplication window in this test

	c := shop.DefaultConfig()
	c.Visitors, c.Days, c.ShiftDay, c.IncidentDay = visitors, days, days/2, days-1
	var buf bytes.Buffer
	if _, err := shop.Generate(&buf, c); err != nil {
		t.Fatal(err)
	}
	var lines []string
	junk := 0
	for i, l := range strings.Split(strings.TrimSpace(buf.String()), "\n") {
		lines = append(lines, l)
		if i%997 == 0 {
			lines = append(lines, fmt.Sprintf(`{"id":"junk-%d","user":"j%d","time":"soon","kind":"action","action":"view_item"}`, i, i))
			junk++
		}
	}
	input := []byte(strings.Join(lines, "\n") + "\n")
	tmp := t.TempDir()
	cfgFile := filepath.Join(tmp, "tl.yaml")
	cfgYAML := "lateness: 3s\nstore:\n  commit_events: 2000\n  commit_interval: 200ms\n"
	if err := os.WriteFile(cfgFile, []byte(cfgYAML), 0o644); err != nil {
		t.Fatal(err)
	}
	fcfg, err := config.Load(cfgFile)
	if err != nil {
		t.Fatal(err)
	}
	port := freePort(t)
	url := fmt.Sprintf("nats://127.0.0.1:%d", port)

	per := (len(lines) + slices - 1) / slices
	var parts [][]string
	for i := 0; i < len(lines); i += per {
		parts = append(parts, lines[i:min(i+per, len(lines))])
	}
	// send runs `ingest send` on ls and returns its stored and duplicate
	// counts from its summary line.
	var (
		pubMu  sync.Mutex
		pubErr error
		fileNo int
	)
	send := func(ls []string) (stored, dup int) {
		pubMu.Lock()
		fileNo++
		name := filepath.Join(tmp, fmt.Sprintf("slice-%d.jsonl", fileNo))
		pubMu.Unlock()
		if err := os.WriteFile(name, []byte(strings.Join(ls, "\n")+"\n"), 0o644); err != nil {
			t.Error(err)
			return
		}
		out, err := exec.Command(bin, "send", "--nats", url, "--rate", rate, "--progress=false", name).CombinedOutput()
		pubMu.Lock()
		defer pubMu.Unlock()
		if err != nil && pubErr == nil {
			pubErr = fmt.Errorf("ingest send %s: %v\n%s", name, err, out)
		}
		m := sendSummary.FindSubmatch(out)
		if m == nil {
			if pubErr == nil {
				pubErr = fmt.Errorf("no summary from ingest send:\n%s", out)
			}
			return 0, 0
		}
		stored, _ = strconv.Atoi(string(m[1]))
		dup, _ = strconv.Atoi(string(m[2]))
		return stored, dup
	}
	var outside, inside int
	publish := func(i int) {
		send(parts[i])
		// The slice's last lines were published moments ago: inside the
		// window.
		_, d := send(valid(parts[i][len(parts[i])-40:]))
		inside += d
		if i >= 2 {
			s, _ := send(valid(parts[i-2][len(parts[i-2])/2:][:60]))
			outside += s
		}
	}

	dir := filepath.Join(tmp, "data")
	var stderr lockedBuffer
	start := func() *exec.Cmd {
		cmd := exec.Command(bin, "--data", dir, "--port", strconv.Itoa(port), "--config", cfgFile, "--http", "off",
			"--dedup-window", window.String(), "--watchdog", "5s")
		cmd.Stdout = &stderr
		cmd.Stderr = &stderr
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		return cmd
	}
	published := make(chan struct{})
	go func() {
		defer close(published)
		for i := range len(parts) - 1 {
			publish(i)
			time.Sleep(window + 200*time.Millisecond)
		}
	}()
	rng := rand.New(rand.NewSource(9))
	kills := 0
	for done := false; !done || kills < minKills; {
		select {
		case <-published:
			done = true
		default:
		}
		cmd := start()
		time.Sleep(time.Duration(300+rng.Intn(1200)) * time.Millisecond)
		cmd.Process.Signal(syscall.SIGKILL)
		err := cmd.Wait()
		if ee, ok := err.(*exec.ExitError); !ok || !ee.ProcessState.Sys().(syscall.WaitStatus).Signaled() {
			t.Fatalf("worker ended before the kill (%v):\n%s", err, stderr.String())
		}
		kills++
	}
	cmd := start()
	defer cmd.Process.Kill()
	publish(len(parts) - 1)
	pubMu.Lock()
	if pubErr != nil {
		t.Fatal(pubErr)
	}
	pubMu.Unlock()

	nc, err := nats.Connect(url)
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	js, err := jetstream.New(nc)
	if err != nil {
		t.Fatal(err)
	}
	scfg := stream.DefaultConfig()
	ctx := context.Background()
	deadline := time.Now().Add(60 * time.Second)
	for {
		cons, err := js.Consumer(ctx, scfg.Stream, stream.ConsumerName(scfg.AllPartitions()))
		if err == nil {
			if info := cons.CachedInfo(); info.NumPending == 0 && info.NumAckPending == 0 && info.AckFloor.Stream > 0 {
				break
			}
		}
		if time.Now().After(deadline) {
			t.Fatalf("worker did not catch up:\n%s", stderr.String())
		}
		time.Sleep(50 * time.Millisecond)
	}
	dead, err := js.Stream(ctx, scfg.DeadStream)
	if err != nil {
		t.Fatal(err)
	}
	deadMsgs := dead.CachedInfo().State.Msgs
	deadLines := map[string]int{}
	oc, err := dead.OrderedConsumer(ctx, jetstream.OrderedConsumerConfig{})
	if err != nil {
		t.Fatal(err)
	}
	for n := uint64(0); n < deadMsgs; {
		batch, err := oc.Fetch(int(deadMsgs-n), jetstream.FetchMaxWait(5*time.Second))
		if err != nil {
			t.Fatal(err)
		}
		got := 0
		for m := range batch.Messages() {
			deadLines[string(m.Data())]++
			got++
		}
		if got == 0 {
			t.Fatalf("read %d of %d dead letters", n, deadMsgs)
		}
		n += uint64(got)
	}
	time.Sleep(fcfg.Lateness.D() + time.Second)
	nc.Close()
	cmd.Process.Signal(syscall.SIGTERM)
	if err := cmd.Wait(); err != nil {
		t.Fatalf("graceful stop: %v\n%s", err, stderr.String())
	}
	t.Logf("%d lines; worker and its embedded server killed %d times; re-published %d inside the window (dropped by the stream), %d outside",
		len(lines), kills, inside, outside)
	if outside == 0 || inside == 0 {
		t.Fatalf("duplicates not exercised: %d inside, %d outside the window", inside, outside)
	}

	cp := checkpointOf(t, dir, scfg.SourceName(scfg.AllPartitions()))
	unique := uint64(len(lines) - junk)
	if n := pendingOf(t, dir, scfg.SourceName(scfg.AllPartitions())); n > 0 {
		t.Errorf("%d events still buffered in the store after the lateness passed", n)
	}
	if cp.Counts.Accepted != unique || cp.Counts.Late != 0 {
		t.Errorf("counts %+v: want accepted %d, late 0 (events lost: %d)", cp.Counts, unique, int64(unique)-int64(cp.Counts.Accepted))
	}
	if cp.Counts.Duplicate < uint64(outside) {
		t.Errorf("duplicates %d, want at least the %d published outside the window", cp.Counts.Duplicate, outside)
	}
	// Every invalid line is in the dead letters, and every rejection is one
	// dead letter. An invalid line can be rejected twice here: when the
	// server was down longer than the 1 s window, a line stored just before
	// a kill is stored again (there is no user to de-duplicate it by).
	if len(deadLines) != junk || cp.Counts.RejectedTotal() != deadMsgs {
		t.Errorf("dead letters: %d distinct lines of %d invalid ones, %d messages for %d rejections", len(deadLines), junk, deadMsgs, cp.Counts.RejectedTotal())
	}
	for l, n := range deadLines {
		if !strings.Contains(l, `"junk-`) {
			t.Errorf("dead letter %q (%d times) is not an invalid line", l, n)
		}
	}
	clean := t.TempDir()
	replayClean(t, clean, fcfg, input)
	from := c.Start
	to := from.Add(time.Duration(days) * 24 * time.Hour)
	got, want := allAnswers(t, dir, fcfg, from, to), allAnswers(t, clean, fcfg, from, to)
	if got != want {
		i := 0
		for i < len(got) && i < len(want) && got[i] == want[i] {
			i++
		}
		lo := max(0, i-100)
		t.Errorf("answers after kills differ from a clean replay at byte %d:\n got …%.300s\nwant …%.300s", i, got[lo:], want[lo:])
	}
}

// sendSummary picks the stored and duplicate counts from the summary line
// of ingest send.
var sendSummary = regexp.MustCompile(`(\d+) stored, (\d+) already in the stream`)

// freePort returns a loopback port free at the time of the call.
func freePort(t *testing.T) int {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer ln.Close()
	return ln.Addr().(*net.TCPAddr).Port
}
