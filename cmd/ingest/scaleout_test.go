package main

import (
	"bytes"
	"context"
	"fmt"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/credit"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/stream"
)

// clusterNode is one embedded server of a three-node JetStream cluster.
type clusterNode struct {
	name string
	srv  *server.Server
	url  string
}

// loopbackPorts reserves n free loopback ports and releases them for the
// servers.
func loopbackPorts(t *testing.T, n int) []int {
	t.Helper()
	ports := make([]int, n)
	ls := make([]net.Listener, n)
	for i := range n {
		l, err := net.Listen("tcp", "127.0.0.1:0")
		if err != nil {
			t.Fatal(err)
		}
		ls[i], ports[i] = l, l.Addr().(*net.TCPAddr).Port
	}
	for _, l := range ls {
		l.Close()
	}
	return ports
}

// startCluster starts three JetStream servers on loopback, routed to each
// other, each with the input partition mapping of cfg on its account (as
// deploy/nats/accounts.conf sets it; deploy_test.go starts the deploy
// files themselves the same way: free ports, routes between them).
func startCluster(t *testing.T, cfg stream.Config) []*clusterNode {
	t.Helper()
	ports := loopbackPorts(t, 6)
	var routes []string
	for _, p := range ports[3:] {
		routes = append(routes, fmt.Sprintf("nats://127.0.0.1:%d", p))
	}
	var nodes []*clusterNode
	for i := range 3 {
		name := fmt.Sprintf("n%d", i+1)
		s, err := server.NewServer(&server.Options{
			ServerName: name,
			Host:       "127.0.0.1",
			Port:       ports[i],
			JetStream:  true,
			StoreDir:   filepath.Join(t.TempDir(), name),
			Cluster:    server.ClusterOpts{Name: "tl-test", Host: "127.0.0.1", Port: ports[3+i]},
			Routes:     server.RoutesFromStr(strings.Join(routes, ",")),
			NoLog:      true,
			NoSigs:     true,
		})
		if err != nil {
			t.Fatal(err)
		}
		if err := s.GlobalAccount().AddMapping(cfg.InputSubjects(), cfg.PartitionMapping()); err != nil {
			t.Fatal(err)
		}
		s.Start()
		t.Cleanup(func() { s.Shutdown(); s.WaitForShutdown() })
		nodes = append(nodes, &clusterNode{name: name, srv: s, url: s.ClientURL()})
	}
	for _, n := range nodes {
		if !n.srv.ReadyForConnections(10 * time.Second) {
			t.Fatalf("%s not ready", n.name)
		}
	}
	return nodes
}

func urlsOf(nodes []*clusterNode) string {
	var u []string
	for _, n := range nodes {
		u = append(u, n.url)
	}
	return strings.Join(u, ",")
}

func buildQuery(t *testing.T) string {
	t.Helper()
	bin := filepath.Join(t.TempDir(), "query")
	cmd := exec.Command("go", "build", "-o", bin, "github.com/touchledger/touchledger/cmd/query")
	cmd.Stderr = os.Stderr
	if err := cmd.Run(); err != nil {
		t.Fatalf("build query: %v", err)
	}
	return bin
}

// TestScaleOutCluster (issue 4, "How it must be checked", scale-out): a
// three-node JetStream cluster on loopback holding the events stream with
// three replicas, two worker processes owning partitions 0-7 and 8-15.
// While the demo events are being published, one NATS node is shut down;
// then query --nats answers (credit under every model, funnel, transitions,
// paths, status) equal a single worker's replay of the same events, the
// workers' accepted counts add up to the events, and with one worker
// stopped the answer is marked partial, naming partitions 8-15.
func TestScaleOutCluster(t *testing.T) {
	if testing.Short() {
		t.Skip("three NATS servers and two worker processes (about 30 s); skipped with -short")
	}
	start := time.Now()
	ingestBin, queryBin := buildIngest(t), buildQuery(t)
	built := time.Since(start)

	c := shop.DefaultConfig()
	c.Visitors, c.Days, c.ShiftDay, c.IncidentDay = 3000, 4, 2, 3
	var buf bytes.Buffer
	gen, err := shop.Generate(&buf, c)
	if err != nil {
		t.Fatal(err)
	}
	input := buf.Bytes()
	work := t.TempDir()
	events := filepath.Join(work, "events.jsonl")
	cfgFile := filepath.Join(work, "tl.yaml")
	if err := os.WriteFile(events, input, 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(cfgFile, []byte("lateness: 2s\nstore:\n  commit_interval: 200ms\n"), 0o644); err != nil {
		t.Fatal(err)
	}

	// The cluster and the replicated stream. The JetStream meta leader is
	// elected shortly after the routes connect: retry until it is.
	scfg := stream.DefaultConfig()
	scfg.Replicas = 3
	nodes := startCluster(t, scfg)
	all := urlsOf(nodes)
	admin, err := nats.Connect(all)
	if err != nil {
		t.Fatal(err)
	}
	defer admin.Close()
	ajs, err := jetstream.New(admin)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 90*time.Second)
	defer cancel()
	for {
		actx, acancel := context.WithTimeout(ctx, 2*time.Second)
		err := stream.EnsureStream(actx, ajs, scfg)
		acancel()
		if err == nil {
			break
		}
		if ctx.Err() != nil {
			t.Fatalf("create the replicated stream: %v", err)
		}
		time.Sleep(200 * time.Millisecond)
	}
	evs, err := ajs.Stream(ctx, scfg.Stream)
	if err != nil {
		t.Fatal(err)
	}
	info, err := evs.Info(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if info.Cluster == nil || len(info.Cluster.Replicas) != 2 || info.Config.Replicas != 3 {
		t.Fatalf("stream cluster info %+v, want a leader and two replicas", info.Cluster)
	}
	clustered := time.Since(start)

	// Two workers, half of the partitions each.
	type worker struct {
		parts string
		cmd   *exec.Cmd
		out   *lockedBuffer
	}
	startWorker := func(parts string) *worker {
		w := &worker{parts: parts, out: &lockedBuffer{}}
		w.cmd = exec.Command(ingestBin, "--data", filepath.Join(work, "worker-"+parts), "--nats", all,
			"--partitions", parts, "--replicas", "3", "--http", "off", "--config", cfgFile,
			"--quiet-after", "200ms", "--watchdog", "5s", "--report-interval", "0")
		w.cmd.Stdout, w.cmd.Stderr = w.out, w.out
		if err := w.cmd.Start(); err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { w.cmd.Process.Kill(); w.cmd.Wait() })
		return w
	}
	stop := func(w *worker) uint64 {
		t.Helper()
		w.cmd.Process.Signal(syscall.SIGTERM)
		if err := w.cmd.Wait(); err != nil {
			t.Fatalf("worker %s: %v\n%s", w.parts, err, w.out.String())
		}
		m := regexp.MustCompile(`stopped: accepted (\d+), duplicate (\d+), rejected (\d+), late (\d+)`).FindStringSubmatch(w.out.String())
		if m == nil {
			t.Fatalf("worker %s printed no summary:\n%s", w.parts, w.out.String())
		}
		if m[3] != "0" || m[4] != "0" {
			t.Errorf("worker %s: %s", w.parts, m[0])
		}
		n, _ := strconv.ParseUint(m[1], 10, 64)
		return n
	}
	lo, hi := startWorker("0-7"), startWorker("8-15")
	// Both consume before the leader is stopped: a consumer being created
	// during the leader change is another matter (see the issue 9 report).
	for _, w := range []*worker{lo, hi} {
		for deadline := time.Now().Add(30 * time.Second); !strings.Contains(w.out.String(), "msg=consuming"); {
			if time.Now().After(deadline) {
				t.Fatalf("worker %s did not start consuming:\n%s", w.parts, w.out.String())
			}
			time.Sleep(20 * time.Millisecond)
		}
	}

	// Publish through a connection to the two other nodes; a third of the
	// way in, shut the stream's leader down (issue 9 item 11). The
	// acknowledgement in flight is lost with it; Send publishes again from
	// the oldest unacknowledged message, and the new leader drops what it
	// already holds by message id: nothing is lost or doubled, nothing
	// lands behind later events (which, hours later in the demo's
	// accelerated event time, would be beyond the lateness). One message
	// in flight: with Send's default window of 2048, the cluster itself
	// stored messages in flight across the leader change out of their
	// publication order (measured: about 1 000 of 11 798 behind later ones,
	// every one stored once) — harmless in real time, where they lie within
	// the lateness, but not with the demo's accelerated clock.
	var victim, keep []*clusterNode
	for _, n := range nodes {
		if n.name == info.Cluster.Leader {
			victim = append(victim, n)
		} else {
			keep = append(keep, n)
		}
	}
	if len(victim) != 1 {
		t.Fatalf("stream leader %q is none of the nodes", info.Cluster.Leader)
	}
	pub, err := nats.Connect(urlsOf(keep))
	if err != nil {
		t.Fatal(err)
	}
	defer pub.Close()
	pjs, err := jetstream.New(pub)
	if err != nil {
		t.Fatal(err)
	}
	sent := make(chan error, 1)
	var stats stream.SendStats
	go func() {
		var err error
		stats, err = stream.Send(ctx, pjs, bytes.NewReader(input), stream.SendOptions{MaxInFlight: 1, AckTimeout: 5 * time.Second, RetryFor: time.Minute})
		sent <- err
	}()
	third := uint64(gen.Events / 3)
	for {
		i, err := evs.Info(ctx)
		if err == nil && i.State.LastSeq >= third {
			break
		}
		if ctx.Err() != nil {
			t.Fatal("publishing did not reach a third of the events")
		}
		time.Sleep(5 * time.Millisecond)
	}
	stoppedAt := info
	if i, err := evs.Info(ctx); err == nil {
		stoppedAt = i
	}
	victim[0].srv.Shutdown()
	victim[0].srv.WaitForShutdown()
	if err := <-sent; err != nil {
		t.Fatal(err)
	}
	published := time.Since(start)
	// Re-published messages the stream already had count as duplicates.
	if stats.Lines != int64(gen.Events) || stats.Stored+stats.Duplicates < int64(gen.Events) || stats.Stored > int64(gen.Events) {
		t.Errorf("send stats %+v, want %d lines, at most %d stored", stats, gen.Events, gen.Events)
	}
	// The stream's API answers once the new leader is elected: ask with
	// short timeouts.
	var after *jetstream.StreamInfo
	for deadline := time.Now().Add(30 * time.Second); ; {
		ictx, icancel := context.WithTimeout(ctx, 2*time.Second)
		after, err = evs.Info(ictx)
		icancel()
		if err == nil && after.Cluster != nil && after.Cluster.Leader != "" {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("stream info after the leader loss: %v", err)
		}
		time.Sleep(200 * time.Millisecond)
	}
	if after.Cluster == nil || after.Cluster.Leader == victim[0].name || after.State.Msgs != uint64(gen.Events) {
		t.Errorf("after the leader loss: leader %v, %d messages; want a new leader and the %d events once", after.Cluster, after.State.Msgs, gen.Events)
	}
	// The stream holds the input once and in input order.
	order := map[string]int{}
	for i, m := range regexp.MustCompile(`"id":"([^"]+)"`).FindAllSubmatch(input, -1) {
		order[string(m[1])] = i
	}
	oc, err := evs.OrderedConsumer(ctx, jetstream.OrderedConsumerConfig{})
	if err != nil {
		t.Fatal(err)
	}
	prev, inversions, firstInv := -1, 0, ""
	for read := 0; read < gen.Events; {
		batch, err := oc.Fetch(1000, jetstream.FetchMaxWait(5*time.Second))
		if err != nil {
			t.Fatal(err)
		}
		n := 0
		for m := range batch.Messages() {
			n++
			i := order[m.Headers().Get("Nats-Msg-Id")]
			if i < prev {
				inversions++
				if firstInv == "" {
					md, _ := m.Metadata()
					firstInv = fmt.Sprintf("line %d at stream sequence %d after line %d", i, md.Sequence.Stream, prev)
				}
			}
			prev = max(prev, i)
		}
		if n == 0 {
			t.Fatalf("read %d of %d stream messages", read, gen.Events)
		}
		read += n
	}
	if inversions > 0 {
		t.Errorf("the stream holds %d messages behind later input lines (first: %s)", inversions, firstInv)
	}
	t.Logf("leader %s shut down at stream sequence %d of %d, new leader %s; send: %+v", victim[0].name, stoppedAt.State.LastSeq, gen.Events, after.Cluster.Leader, stats)

	// The single-worker reference: a replay of the same file.
	ref := filepath.Join(work, "replay")
	if out, err := exec.Command(ingestBin, "--data", ref, "--replay", events, "--config", cfgFile).CombinedOutput(); err != nil {
		t.Fatalf("replay: %v\n%s", err, out)
	}

	// Every query --nats answer equals the replay's, once the workers have
	// caught up and released their buffers.
	from, to := query.FormatTime(c.Start), query.FormatTime(c.Start.Add(time.Duration(c.Days)*24*time.Hour))
	var commands [][]string
	for _, m := range credit.RuleModels {
		commands = append(commands, []string{"credit", "--model", m.String()})
	}
	commands = append(commands, []string{"credit", "--model", query.ModelMarkov}, []string{"credit", "--model", query.ModelShapley},
		[]string{"credit", "--model", "linear", "--by", "campaign"},
		[]string{"funnel"}, []string{"transitions", "--level", "channel"}, []string{"transitions", "--level", "action"},
		[]string{"paths", "--level", "action"}, []string{"status"})
	live := []string{"--nats", urlsOf(keep), "--timeout", "3s"}
	ask := func(source []string, cmd []string) (string, string, error) {
		args := append(append(append([]string{}, cmd...), source...), "--from", from, "--to", to, "--format", "json")
		q := exec.Command(queryBin, args...)
		var o, e bytes.Buffer
		q.Stdout, q.Stderr = &o, &e
		err := q.Run()
		// A live worker's latest event time follows the wall clock while
		// its input is quiet (stream doc, "Event time on a live bus"); a
		// replay's stays at the last event. Every count must be equal.
		out := regexp.MustCompile(`(?m)^\s*"latest_event": .*\n`).ReplaceAllString(o.String(), "")
		return out, e.String(), err
	}
	want := map[string]string{}
	for _, cmd := range commands {
		out, errOut, err := ask([]string{"--data", ref}, cmd)
		if err != nil {
			t.Fatalf("query %v --data: %v\n%s", cmd, err, errOut)
		}
		want[strings.Join(cmd, " ")] = out
	}
	status := strings.Join([]string{"status"}, " ")
	deadline := time.Now().Add(40 * time.Second)
	for {
		got, _, err := ask(live, []string{"status"})
		if err == nil && got == want[status] {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("query --nats status never equalled the replay:\n got %s\nwant %s\nworker 0-7:\n%s\nworker 8-15:\n%s",
				got, want[status], lo.out.String(), hi.out.String())
		}
		time.Sleep(200 * time.Millisecond)
	}
	caughtUp := time.Since(start)
	for _, cmd := range commands {
		got, errOut, err := ask(live, cmd)
		if err != nil {
			t.Errorf("query %v --nats: %v\n%s", cmd, err, errOut)
			continue
		}
		if w := want[strings.Join(cmd, " ")]; got != w {
			t.Errorf("query %v: --nats answer differs from the single-worker replay:\n got %.600s\nwant %.600s", cmd, got, w)
		}
	}

	// One worker stopped: the answer is marked partial and names 8-15.
	accepted := stop(hi)
	out, errOut, err := ask(append(live[:2:2], "--timeout", "1s"), []string{"credit", "--model", "last-touch"})
	if err != nil || !strings.Contains(out, `"missing_partitions": [`) || !strings.Contains(errOut, "partial answer: partitions 8-15 did not answer") {
		t.Errorf("with worker 8-15 stopped: err %v\n%s\n%s", err, out, errOut)
	}
	if m := regexp.MustCompile(`"missing_partitions": \[([^\]]*)\]`).FindStringSubmatch(out); m == nil ||
		strings.Join(strings.Fields(m[1]), "") != "8,9,10,11,12,13,14,15" {
		t.Errorf("missing partitions %q, want 8-15", m)
	}
	accepted += stop(lo)
	if accepted != uint64(gen.Events) {
		t.Errorf("workers accepted %d events together, want the %d published", accepted, gen.Events)
	}
	t.Logf("%d events; built %v, cluster ready %v, published %v (%.0f events/s through R3), answers equal %v after start, total %v",
		gen.Events, built.Round(time.Millisecond), clustered.Round(time.Millisecond), published.Round(time.Millisecond),
		float64(gen.Events)/stats.Took.Seconds(), caughtUp.Round(time.Millisecond), time.Since(start).Round(time.Millisecond))
}
