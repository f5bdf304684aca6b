package remote

import (
	"encoding/json"
	"errors"
	"fmt"
	"reflect"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/micro"

	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/credit"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/state"
	"github.com/touchledger/touchledger/internal/tally"
	"github.com/touchledger/touchledger/internal/testsupport"
)

func connect(t testing.TB, s *server.Server) *nats.Conn {
	t.Helper()
	nc, err := nats.Connect(s.ClientURL())
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(nc.Close)
	return nc
}

// cluster is a single store holding every event, the same events split over
// two workers' stores (partitions 0-7 and 8-15), and the NATS server they
// answer on.
type cluster struct {
	cfg          config.Config
	full, lo, hi *state.Store
	srv          *server.Server
	svcLo, svcHi micro.Service
}

func newCluster(t testing.TB) *cluster {
	t.Helper()
	cfg := config.Default()
	events := testsupport.DemoEvents(t)
	c := &cluster{cfg: cfg, srv: testsupport.StartNATS(t, testsupport.NATSOptions{MaxPayload: 0, Partitions: 16})}
	c.full = testsupport.Replay(t, t.TempDir(), cfg, events)
	c.lo = testsupport.Replay(t, t.TempDir(), cfg, testsupport.SplitByPartition(t, events, 16, 0, 7))
	c.hi = testsupport.Replay(t, t.TempDir(), cfg, testsupport.SplitByPartition(t, events, 16, 8, 15))
	res := c.full.Resolutions()
	var err error
	// Each worker has its own connection, as separate processes would.
	if c.svcLo, err = Register(connect(t, c.srv), "tl", 0, 7, c.lo, res, query.ParamsFrom(cfg)); err != nil {
		t.Fatal(err)
	}
	if c.svcHi, err = Register(connect(t, c.srv), "tl", 8, 15, c.hi, res, query.ParamsFrom(cfg)); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { c.svcLo.Stop(); c.svcHi.Stop() })
	return c
}

func (c *cluster) remoteQuerier(t testing.TB, timeout time.Duration) (*query.Querier, *Source) {
	t.Helper()
	src, err := NewSource(connect(t, c.srv), Options{Timeout: timeout, Resolutions: c.full.Resolutions()})
	if err != nil {
		t.Fatal(err)
	}
	q, err := query.NewQuerierFrom(src, c.full.Resolutions(), query.ParamsFrom(c.cfg))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(q.Close)
	return q, src
}

func localQuerier(t testing.TB, st *state.Store, cfg config.Config) *query.Querier {
	t.Helper()
	q, err := query.NewQuerier(st, query.ParamsFrom(cfg))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(q.Close)
	return q
}

// allAnswers runs every query command (all eight credit models, by channel
// and campaign, Markov orders 1 and 2, shift, transitions, paths, funnel,
// alerts with points, status) and returns each answer as JSON.
func allAnswers(t *testing.T, q *query.Querier) map[string]string {
	t.Helper()
	out := map[string]string{}
	put := func(name string, v any, err error) {
		t.Helper()
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		b, err := json.Marshal(v)
		if err != nil {
			t.Fatal(err)
		}
		out[name] = string(b)
	}
	week := query.Span{Last: 7 * 24 * time.Hour}
	models := []string{query.ModelMarkov, query.ModelShapley}
	for _, m := range credit.RuleModels {
		models = append(models, m.String())
	}
	for _, m := range models {
		a, err := q.Credit(m, query.ByChannel, 0, week)
		put("credit "+m, a, err)
		s, err := q.Shift(m, 0, 5)
		put("shift "+m, s, err)
		if !query.IsDataDriven(m) {
			a, err := q.Credit(m, query.ByCampaign, 0, week)
			put("credit by campaign "+m, a, err)
		}
	}
	a, err := q.Credit(query.ModelMarkov, query.ByChannel, 2, week)
	put("credit markov order 2", a, err)
	for _, level := range []string{"channel", "action"} {
		tr, err := q.Transitions(level, 0, week)
		put("transitions "+level, tr, err)
		p, err := q.Paths(level, 10, week)
		put("paths "+level, p, err)
	}
	f, err := q.Funnel(week)
	put("funnel", f, err)
	al, err := q.Alerts(query.Span{Last: 3 * 24 * time.Hour}, true)
	put("alerts", al, err)
	s, err := q.Status(week)
	put("status", s, err)
	return out
}

// TestPartitionRuleMatchesServer: the split used by these tests is the one
// the server's subject mapping applies to live events.
func TestPartitionRuleMatchesServer(t *testing.T) {
	s := testsupport.StartNATS(t, testsupport.NATSOptions{MaxPayload: 0, Partitions: 16})
	nc := connect(t, s)
	sub, err := nc.SubscribeSync("tl.ev.>")
	if err != nil {
		t.Fatal(err)
	}
	for i := range 40 {
		user := "visitor-" + strconv.Itoa(i)
		if err := nc.Publish("tl.in.touch."+testsupport.UserKey(user), nil); err != nil {
			t.Fatal(err)
		}
		m, err := sub.NextMsg(2 * time.Second)
		if err != nil {
			t.Fatal(err)
		}
		got := strings.Split(m.Subject, ".")[2]
		if want := strconv.Itoa(testsupport.PartitionOf(user, 16)); got != want {
			t.Errorf("%s: server put it in partition %s, partitionOf says %s", user, got, want)
		}
	}
}

// TestMergedAnswersEqualOneStore: two workers holding half of the
// partitions each answer every query exactly as one store holding all
// events does (issue 4, "Scale-out"; exact by the additivity of
// internal/tally).
func TestMergedAnswersEqualOneStore(t *testing.T) {
	if testing.Short() {
		t.Skip("replays the demo three times")
	}
	c := newCluster(t)
	q, src := c.remoteQuerier(t, 2*time.Second)
	if m := src.Missing(); m != nil {
		t.Fatalf("missing %v with both workers up", m)
	}
	if got, want := len(src.Workers()), 2; got != want {
		t.Fatalf("%d workers discovered, want %d", got, want)
	}
	got := allAnswers(t, q)
	want := allAnswers(t, localQuerier(t, c.full, c.cfg))
	for name, w := range want {
		if !testsupport.CloseJSON(got[name], w) {
			t.Errorf("%s:\n got %s\nwant %s", name, got[name], w)
		}
	}
	// The halves are not trivial: each holds conversions.
	for _, st := range []*state.Store{c.lo, c.hi} {
		s, err := localQuerier(t, st, c.cfg).Status(query.Span{Last: 7 * 24 * time.Hour})
		if err != nil || s.Conversions == 0 {
			t.Fatalf("a half holds %d conversions (%v)", s.Conversions, err)
		}
	}
}

// TestStoppedWorkerGivesMarkedPartialAnswer: with the worker of 8-15
// stopped, the answer lists those partitions and equals the other half's own
// answer.
func TestStoppedWorkerGivesMarkedPartialAnswer(t *testing.T) {
	if testing.Short() {
		t.Skip("replays the demo three times")
	}
	c := newCluster(t)
	if err := c.svcHi.Stop(); err != nil {
		t.Fatal(err)
	}
	q, src := c.remoteQuerier(t, 300*time.Millisecond)
	if got, want := src.Missing(), []int{8, 9, 10, 11, 12, 13, 14, 15}; !slices.Equal(got, want) {
		t.Fatalf("missing %v, want %v", got, want)
	}
	if got, want := query.PartialWarning(src.Missing()), "partial answer: partitions 8-15 did not answer"; got != want {
		t.Errorf("warning %q, want %q", got, want)
	}
	got := allAnswers(t, q)
	want := allAnswers(t, localQuerier(t, c.lo, c.cfg))
	for name, w := range want {
		// Every answer names the partitions that did not answer; apart
		// from that it is the answering half's own.
		var m map[string]any
		if err := json.Unmarshal([]byte(got[name]), &m); err != nil {
			t.Fatal(err)
		}
		if mp, _ := json.Marshal(m["missing_partitions"]); string(mp) != "[8,9,10,11,12,13,14,15]" {
			t.Errorf("%s: missing_partitions %s, want 8-15", name, mp)
		}
		delete(m, "missing_partitions")
		rest, _ := json.Marshal(m)
		if !testsupport.CloseJSON(string(rest), w) {
			t.Errorf("%s:\n got %s\nwant %s", name, rest, w)
		}
	}
	// And it is not the whole answer.
	full := allAnswers(t, localQuerier(t, c.full, c.cfg))
	if testsupport.CloseJSON(got["status"], full["status"]) {
		t.Errorf("half the partitions gave the whole status: %s", got["status"])
	}
}

// fakeWorker answers discovery with r and does nothing else.
func fakeWorker(t testing.TB, nc *nats.Conn, r LatestReply) {
	t.Helper()
	if r.Version == "" {
		r.Version = Version
	}
	body, _ := json.Marshal(r)
	sub, err := nc.Subscribe(LatestSubject("tl"), func(m *nats.Msg) { m.Respond(body) })
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { sub.Unsubscribe() })
	nc.Flush()
}

// TestDiscoveryErrors: nobody listening, overlapping ranges, a range beyond
// the partition count, different resolutions.
func TestDiscoveryErrors(t *testing.T) {
	s := testsupport.StartNATS(t, testsupport.NATSOptions{MaxPayload: 0, Partitions: 16})
	res := state.DefaultOptions("x").Resolutions
	wire := wireResolutions(res)
	cases := []struct {
		name    string
		workers []LatestReply
		o       Options
		want    string
	}{
		{"nobody", nil, Options{Timeout: 5 * time.Second}, "no touchledger worker answered on tl.svc.latest"},
		{"overlap", []LatestReply{{First: 0, Last: 7, Resolutions: wire}, {First: 4, Last: 11, Resolutions: wire}}, Options{Timeout: 300 * time.Millisecond}, "overlapping partitions"},
		{"beyond", []LatestReply{{First: 8, Last: 31, Resolutions: wire}}, Options{Timeout: 300 * time.Millisecond}, "there are 16 partitions"},
		{"version", []LatestReply{{Version: "2.0.0", First: 0, Last: 15, Resolutions: wire}}, Options{Timeout: 300 * time.Millisecond}, `speaks protocol "2.0.0", this query "1.1.0"`},
		{"resolutions", []LatestReply{{First: 0, Last: 15, Resolutions: wire[:1]}}, Options{Timeout: 300 * time.Millisecond, Resolutions: res}, "keeps buckets 5m=300s/1209600s"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			for _, w := range tc.workers {
				fakeWorker(t, connect(t, s), w)
			}
			start := time.Now()
			_, err := NewSource(connect(t, s), tc.o)
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("error %v, want one mentioning %q", err, tc.want)
			}
			if tc.workers == nil {
				if !errors.Is(err, ErrNoWorkers) {
					t.Errorf("error %v is not ErrNoWorkers", err)
				}
				// No responders is reported by the server at once.
				if d := time.Since(start); d > 2*time.Second {
					t.Errorf("took %v to notice nobody listens", d)
				}
			}
		})
	}
}

// TestRequestTimeout: a worker that answers discovery but not the sum
// request makes the answer fail with a timeout naming its partitions.
func TestRequestTimeout(t *testing.T) {
	s := testsupport.StartNATS(t, testsupport.NATSOptions{MaxPayload: 0, Partitions: 16})
	fakeWorker(t, connect(t, s), LatestReply{First: 0, Last: 15, HasData: true, LatestNanos: 1, Resolutions: wireResolutions(state.DefaultOptions("x").Resolutions)})
	hang, err := connect(t, s).Subscribe(SumSubject("tl", 0, 15), func(*nats.Msg) {})
	if err != nil {
		t.Fatal(err)
	}
	defer hang.Unsubscribe()
	src, err := NewSource(connect(t, s), Options{Timeout: 200 * time.Millisecond})
	if err != nil {
		t.Fatal(err)
	}
	_, err = src.Sum(query.Plan{Pieces: []query.Piece{{Res: 2, From: 0, To: 86400}}}, tally.Totals)
	var we *WorkerError
	if !errors.As(err, &we) || !errors.Is(err, nats.ErrTimeout) || we.First != 0 || we.Last != 15 {
		t.Fatalf("error %v, want a timeout of partitions 0-15", err)
	}
	if want := "the worker of partitions 0-15 did not answer the sum request"; !strings.Contains(err.Error(), want) {
		t.Errorf("error %q lacks %q", err, want)
	}
	// The buckets endpoint has no listener at all: no responders.
	_, err = src.Buckets(0, tally.Funnel, 0, 3600)
	if !errors.Is(err, nats.ErrNoResponders) {
		t.Errorf("buckets error %v, want no responders", err)
	}
}

// TestServiceErrors: malformed and out-of-range requests get 400, a reply
// above max_payload gets 413, and the service describes itself to micro
// discovery.
func TestServiceErrors(t *testing.T) {
	cfg := config.Default()
	s := testsupport.StartNATS(t, testsupport.NATSOptions{MaxPayload: 4096, Partitions: 16})
	st := testsupport.Replay(t, t.TempDir(), cfg, testsupport.DemoEvents(t))
	svc, err := Register(connect(t, s), "tl", 0, 15, st, st.Resolutions(), query.ParamsFrom(config.Default()))
	if err != nil {
		t.Fatal(err)
	}
	defer svc.Stop()
	nc := connect(t, s)
	day := int64(24 * 3600)
	start := time.Date(2026, 10, 1, 0, 0, 0, 0, time.UTC).Unix()
	cases := []struct {
		name, subject, body, code string
	}{
		{"not json", SumSubject("tl", 0, 15), "{", CodeBadRequest},
		{"unknown family", SumSubject("tl", 0, 15), `{"family":99,"pieces":[]}`, CodeBadRequest},
		{"resolution out of range", SumSubject("tl", 0, 15), `{"family":1,"pieces":[{"res":3,"from":0,"to":1}]}`, CodeBadRequest},
		{"buckets backwards", BucketsSubject("tl", 0, 15), `{"res":0,"family":7,"from":10,"to":0}`, CodeBadRequest},
		{"too large", SumSubject("tl", 0, 15), fmt.Sprintf(`{"family":9,"pieces":[{"res":2,"from":%d,"to":%d}]}`, start, start+7*day), CodeTooLarge},
		{"fits", SumSubject("tl", 0, 15), fmt.Sprintf(`{"family":1,"pieces":[{"res":2,"from":%d,"to":%d}]}`, start, start+7*day), ""},
	}
	for _, tc := range cases {
		m, err := nc.Request(tc.subject, []byte(tc.body), 2*time.Second)
		if err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		code, _ := serviceError(m)
		if code != tc.code {
			t.Errorf("%s: code %q (%s), want %q", tc.name, code, m.Header.Get(micro.ErrorHeader), tc.code)
		}
		if got := m.Header.Get(HeaderPartitions); got != "0-15" {
			t.Errorf("%s: %s header %q, want 0-15", tc.name, HeaderPartitions, got)
		}
	}
	// $SRV.INFO lists the instance with its endpoints.
	m, err := nc.Request("$SRV.INFO."+ServiceName, nil, 2*time.Second)
	if err != nil {
		t.Fatal(err)
	}
	var info micro.Info
	if err := json.Unmarshal(m.Data, &info); err != nil {
		t.Fatal(err)
	}
	var subjects []string
	for _, e := range info.Endpoints {
		subjects = append(subjects, e.Subject)
	}
	slices.Sort(subjects)
	want := []string{"tl.svc.0-15.ask", "tl.svc.0-15.buckets", "tl.svc.0-15.sum", "tl.svc.latest"}
	if info.Name != ServiceName || info.Version != Version || !slices.Equal(subjects, want) || info.Metadata["partitions"] != "0-15" {
		t.Errorf("info %+v, want %s %s with endpoints %v", info, ServiceName, Version, want)
	}
}

// TestRegisterChecks: bad arguments are refused before anything is
// subscribed.
func TestRegisterChecks(t *testing.T) {
	s := testsupport.StartNATS(t, testsupport.NATSOptions{MaxPayload: 0, Partitions: 16})
	nc := connect(t, s)
	st := testsupport.Replay(t, t.TempDir(), config.Default(), nil)
	res := st.Resolutions()
	cases := []struct {
		name        string
		prefix      string
		first, last int
		res         []state.Resolution
		want        string
	}{
		{"empty prefix", "", 0, 7, res, "prefix is empty"},
		{"wildcard prefix", "tl.*", 0, 7, res, "without wildcards"},
		{"backwards range", "tl", 8, 7, res, "bad partition range 8-7"},
		{"negative", "tl", -1, 7, res, "bad partition range -1-7"},
		{"no resolutions", "tl", 0, 7, nil, "no resolutions"},
	}
	for _, tc := range cases {
		_, err := Register(nc, tc.prefix, tc.first, tc.last, st, tc.res, query.ParamsFrom(config.Default()))
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: error %v, want %q", tc.name, err, tc.want)
		}
	}
}

// TestBucketsCodecRoundTrip: what AppendBuckets writes, DecodeBuckets reads
// back; corrupt bodies are refused.
func TestBucketsCodecRoundTrip(t *testing.T) {
	tables := map[int64]tally.Table{
		-3600: {"a": {1, 2, 3}},
		0:     {},
		7200:  {"b" + tally.Sep + "c": {-5, 0, 9}, "": {1, 0, 0}},
	}
	body := AppendBuckets(nil, []int64{-3600, 0, 7200}, tables)
	got := map[int64]tally.Table{}
	if err := DecodeBuckets(body, got); err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(got, tables) {
		t.Errorf("got %v, want %v", got, tables)
	}
	for _, bad := range [][]byte{{}, {5}, body[:len(body)-1], append(slices.Clone(body), 0)} {
		if err := DecodeBuckets(bad, map[int64]tally.Table{}); !errors.Is(err, tally.ErrCorrupt) {
			t.Errorf("%x: error %v, want ErrCorrupt", bad, err)
		}
	}
}

// BenchmarkCreditQuery times one Markov credit query over a week (two table
// sums) through two workers on an embedded server, against the same query on
// one local store. Fixed-seed demo data built outside the loop.
func BenchmarkCreditQuery(b *testing.B) {
	c := newCluster(b)
	week := query.Span{Last: 7 * 24 * time.Hour}
	b.Run("nats-2-workers", func(b *testing.B) {
		src, err := NewSource(connect(b, c.srv), Options{Resolutions: c.full.Resolutions()})
		if err != nil {
			b.Fatal(err)
		}
		q, err := query.NewQuerierFrom(src, c.full.Resolutions(), query.ParamsFrom(c.cfg))
		if err != nil {
			b.Fatal(err)
		}
		defer q.Close()
		b.ReportAllocs()
		for b.Loop() {
			if _, err := q.Credit(query.ModelMarkov, query.ByChannel, 1, week); err != nil {
				b.Fatal(err)
			}
		}
	})
	b.Run("local", func(b *testing.B) {
		q, err := query.NewQuerier(c.full, query.ParamsFrom(c.cfg))
		if err != nil {
			b.Fatal(err)
		}
		defer q.Close()
		b.ReportAllocs()
		for b.Loop() {
			if _, err := q.Credit(query.ModelMarkov, query.ByChannel, 1, week); err != nil {
				b.Fatal(err)
			}
		}
	})
}

// TestWorkersAnnounceConfiguration: discovery carries each worker's
// query configuration and resolutions; equal ones are used, different
// ones are reported naming the ranges and the settings, none (old
// workers) is ErrNoConfig. The rules are this package's (Source.Config).
func TestWorkersAnnounceConfiguration(t *testing.T) {
	s := testsupport.StartNATS(t, testsupport.NATSOptions{})
	wire := wireResolutions(state.DefaultOptions("x").Resolutions)
	base := query.ParamsFrom(config.Default())
	other := base
	other.FunnelSteps = []string{"product_view", "order"}
	other.AlertStep = "product_view"
	cases := []struct {
		name   string
		lo, hi *query.Params
		want   string // "" = the configuration is base
	}{
		{"same", &base, &base, ""},
		{"different", &base, &other, "partitions 0-7 and 8-15 differ in alert_step, funnel_steps"},
		{"old workers", nil, nil, ErrNoConfig.Error()},
	}
	for _, c := range cases {
		nc := connect(t, s)
		fakeWorker(t, nc, LatestReply{First: 0, Last: 7, Resolutions: wire, Params: c.lo})
		nc2 := connect(t, s)
		fakeWorker(t, nc2, LatestReply{First: 8, Last: 15, Resolutions: wire, Params: c.hi})
		src, err := NewSource(connect(t, s), Options{Timeout: 2 * time.Second})
		if err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		if got := src.Resolutions(); !slices.Equal(wireResolutions(got), wire) {
			t.Errorf("%s: resolutions %v, want the announced %v", c.name, got, wire)
		}
		p, err := src.Config()
		switch {
		case c.want == "" && (err != nil || !reflect.DeepEqual(p, base)):
			t.Errorf("%s: config %+v, %v; want the announced one", c.name, p, err)
		case c.want != "" && (err == nil || !strings.Contains(err.Error(), c.want)):
			t.Errorf("%s: error %v, want one mentioning %q", c.name, err, c.want)
		}
		nc.Close()
		nc2.Close()
	}
}
