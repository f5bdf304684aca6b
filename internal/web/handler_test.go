package web_test

import (
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"errors"
	"io"
	"math"
	"net/http"
	"net/http/httptest"
	"os"
	"os/exec"
	"reflect"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/common/expfmt"
	"github.com/prometheus/common/model"

	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/state"
	"github.com/touchledger/touchledger/internal/tally"
	"github.com/touchledger/touchledger/internal/web"
)

func mustTime(s string) time.Time {
	t, err := query.ParseTime(s)
	if err != nil {
		panic(err)
	}
	return t
}

// apiCases pair a request with what `query` prints for the same options:
// the same Querier method and query.Write* formatter cmd/query calls.
//
// inexact, when set, compares decoded values within 1e-12 relative instead
// of bytes (for answers that are not bit-for-bit reproducible; none are now
// that data-driven shares are summed in a fixed order).
var apiCases = []struct {
	path    string
	inexact bool
	write   func(q *query.Querier, w io.Writer, f query.Format) error
}{
	{"/api/credit?model=linear", false, func(q *query.Querier, w io.Writer, f query.Format) error {
		a, err := q.Credit("linear", query.ByChannel, 1, query.Span{})
		if err != nil {
			return err
		}
		return query.WriteCredit(w, a, f, false)
	}},
	{"/api/credit?model=time-decay&by=campaign&last=7d", false, func(q *query.Querier, w io.Writer, f query.Format) error {
		a, err := q.Credit("time-decay", query.ByCampaign, 1, query.Span{Last: 7 * 24 * time.Hour})
		if err != nil {
			return err
		}
		return query.WriteCredit(w, a, f, false)
	}},
	{"/api/credit?model=markov&order=2&from=2026-10-03&to=2026-10-08T12:00:00%2B02:00", false, func(q *query.Querier, w io.Writer, f query.Format) error {
		a, err := q.Credit("markov", query.ByChannel, 2, query.Span{From: mustTime("2026-10-03"), To: mustTime("2026-10-08T10:00:00Z")})
		if err != nil {
			return err
		}
		return query.WriteCredit(w, a, f, false)
	}},
	{"/api/credit?model=shapley&last=5d", false, func(q *query.Querier, w io.Writer, f query.Format) error {
		a, err := q.Credit("shapley", query.ByChannel, 1, query.Span{Last: 5 * 24 * time.Hour})
		if err != nil {
			return err
		}
		return query.WriteCredit(w, a, f, false)
	}},
	{"/api/shift?model=position-based&days=5", false, func(q *query.Querier, w io.Writer, f query.Format) error {
		a, err := q.Shift("position-based", 1, 5)
		if err != nil {
			return err
		}
		return query.WriteShift(w, a, f, false)
	}},
	{"/api/shift?model=markov&order=3", false, func(q *query.Querier, w io.Writer, f query.Format) error {
		a, err := q.Shift("markov", 3, 14)
		if err != nil {
			return err
		}
		return query.WriteShift(w, a, f, false)
	}},
	{"/api/transitions?level=channel&order=2", false, func(q *query.Querier, w io.Writer, f query.Format) error {
		a, err := q.Transitions("channel", 2, query.Span{})
		if err != nil {
			return err
		}
		return query.WriteTransitions(w, a, f)
	}},
	{"/api/transitions?level=action&last=3d", false, func(q *query.Querier, w io.Writer, f query.Format) error {
		a, err := q.Transitions("action", 1, query.Span{Last: 3 * 24 * time.Hour})
		if err != nil {
			return err
		}
		return query.WriteTransitions(w, a, f)
	}},
	{"/api/paths?level=action&top=5&last=7d", false, func(q *query.Querier, w io.Writer, f query.Format) error {
		a, err := q.Paths("action", 5, query.Span{Last: 7 * 24 * time.Hour})
		if err != nil {
			return err
		}
		return query.WritePaths(w, a, f)
	}},
	{"/api/paths?level=channel", false, func(q *query.Querier, w io.Writer, f query.Format) error {
		a, err := q.Paths("channel", 10, query.Span{})
		if err != nil {
			return err
		}
		return query.WritePaths(w, a, f)
	}},
	{"/api/funnel?last=7d", false, func(q *query.Querier, w io.Writer, f query.Format) error {
		a, err := q.Funnel(query.Span{Last: 7 * 24 * time.Hour})
		if err != nil {
			return err
		}
		return query.WriteFunnel(w, a, f)
	}},
	{"/api/funnel?from=2026-10-05T00:00:00Z", false, func(q *query.Querier, w io.Writer, f query.Format) error {
		a, err := q.Funnel(query.Span{From: mustTime("2026-10-05")})
		if err != nil {
			return err
		}
		return query.WriteFunnel(w, a, f)
	}},
	{"/api/alerts?points=1&last=1d", false, func(q *query.Querier, w io.Writer, f query.Format) error {
		a, err := q.Alerts(query.Span{Last: 24 * time.Hour}, true)
		if err != nil {
			return err
		}
		return query.WriteAlerts(w, a, f)
	}},
	{"/api/alerts", false, func(q *query.Querier, w io.Writer, f query.Format) error {
		a, err := q.Alerts(query.Span{}, false)
		if err != nil {
			return err
		}
		return query.WriteAlerts(w, a, f)
	}},
	{"/api/status", false, func(q *query.Querier, w io.Writer, f query.Format) error {
		s, err := q.Status(query.Span{})
		if err != nil {
			return err
		}
		return query.WriteStatus(w, s, f)
	}},
	{"/api/status?last=2d", false, func(q *query.Querier, w io.Writer, f query.Format) error {
		s, err := q.Status(query.Span{Last: 48 * time.Hour})
		if err != nil {
			return err
		}
		return query.WriteStatus(w, s, f)
	}},
}

func withParam(path, kv string) string {
	if strings.Contains(path, "?") {
		return path + "&" + kv
	}
	return path + "?" + kv
}

func TestAPIAnswersEqualQuery(t *testing.T) {
	f := newFixture(t, web.Options{})
	q := f.querier(t)
	for _, c := range apiCases {
		t.Run(c.path, func(t *testing.T) {
			var wantJSON, wantCSV bytes.Buffer
			if err := c.write(q, &wantJSON, query.JSON); err != nil {
				t.Fatal(err)
			}
			if err := c.write(q, &wantCSV, query.CSV); err != nil {
				t.Fatal(err)
			}
			requests := []struct {
				how, path string
				header    []string
				want      []byte
				ctype     string
			}{
				{"default", c.path, nil, wantJSON.Bytes(), "application/json"},
				{"format=json", withParam(c.path, "format=json"), []string{"Accept", "text/csv"}, wantJSON.Bytes(), "application/json"},
				{"Accept json", c.path, []string{"Accept", "text/csv;q=0.5, application/json"}, wantJSON.Bytes(), "application/json"},
				{"Accept csv", c.path, []string{"Accept", "text/csv"}, wantCSV.Bytes(), "text/csv; charset=utf-8"},
				{"format=csv", withParam(c.path, "format=csv"), nil, wantCSV.Bytes(), "text/csv; charset=utf-8"},
			}
			for _, r := range requests {
				resp, got := f.get(t, r.path, r.header...)
				if resp.StatusCode != http.StatusOK {
					t.Fatalf("%s: status %d: %s", r.how, resp.StatusCode, got)
				}
				if ct := resp.Header.Get("Content-Type"); ct != r.ctype {
					t.Errorf("%s: Content-Type %q, want %q", r.how, ct, r.ctype)
				}
				if !c.inexact && !bytes.Equal(got, r.want) {
					t.Errorf("%s: body differs from query's output\n got: %.300s\nwant: %.300s", r.how, got, r.want)
				}
				if r.ctype != "application/json" {
					if c.inexact && !sameCSVShape(got, r.want) {
						t.Errorf("%s: CSV rows differ from query's output\n got: %.300s\nwant: %.300s", r.how, got, r.want)
					}
					continue
				}
				var gotV, wantV any
				if err := json.Unmarshal(got, &gotV); err != nil {
					t.Fatal(err)
				}
				if err := json.Unmarshal(r.want, &wantV); err != nil {
					t.Fatal(err)
				}
				tol := 0.0
				if c.inexact {
					tol = 1e-12
				}
				if path, ok := sameJSON(gotV, wantV, tol); !ok {
					t.Errorf("%s: decoded JSON differs at %s", r.how, path)
				}
				if m, _ := wantV.(map[string]any); len(m) < 3 {
					t.Errorf("answer has only %d fields: %v", len(m), m)
				}
			}
		})
	}
}

// sameJSON compares decoded JSON; numbers within tol relative (0: equal).
// It returns the path of the first difference.
func sameJSON(got, want any, tol float64) (string, bool) {
	switch w := want.(type) {
	case map[string]any:
		g, ok := got.(map[string]any)
		if !ok || len(g) != len(w) {
			return "", false
		}
		for k := range w {
			if p, ok := sameJSON(g[k], w[k], tol); !ok {
				return "." + k + p, false
			}
		}
		return "", true
	case []any:
		g, ok := got.([]any)
		if !ok || len(g) != len(w) {
			return "", false
		}
		for i := range w {
			if p, ok := sameJSON(g[i], w[i], tol); !ok {
				return "[" + strconv.Itoa(i) + "]" + p, false
			}
		}
		return "", true
	case float64:
		g, ok := got.(float64)
		return "", ok && math.Abs(g-w) <= tol*math.Max(1, math.Abs(w))
	default:
		return "", reflect.DeepEqual(got, want)
	}
}

// sameCSVShape reports whether two CSV texts have the same rows and the same
// non-numeric cells (numbers may differ in the last bits; see inexact).
func sameCSVShape(got, want []byte) bool {
	g, err1 := csv.NewReader(bytes.NewReader(got)).ReadAll()
	w, err2 := csv.NewReader(bytes.NewReader(want)).ReadAll()
	if err1 != nil || err2 != nil || len(g) != len(w) {
		return false
	}
	for i := range w {
		if len(g[i]) != len(w[i]) {
			return false
		}
		for j := range w[i] {
			gf, e1 := strconv.ParseFloat(g[i][j], 64)
			wf, e2 := strconv.ParseFloat(w[i][j], 64)
			if e1 == nil && e2 == nil {
				if math.Abs(gf-wf) > 1e-12*math.Max(1, math.Abs(wf)) {
					return false
				}
			} else if g[i][j] != w[i][j] {
				return false
			}
		}
	}
	return true
}

func TestAPIBadParameters(t *testing.T) {
	f := newFixture(t, web.Options{})
	cases := []struct{ path, wantInError string }{
		{"/api/credit", "model: is required"},
		{"/api/credit?model=hunch", `model: unknown model "hunch"`},
		{"/api/credit?model=linear&by=region", "unknown grouping"},
		{"/api/credit?model=shapley&by=campaign", "channels only"},
		{"/api/credit?model=markov&order=0", "order: must be at least 1"},
		{"/api/credit?model=markov&order=9", "order: must be 1 to 4"},
		{"/api/credit?model=markov&order=4", "order: must be 1 to 3 (markov_max_order)"},
		{"/api/credit?model=linear&order=2", "order: applies to the markov model only"},
		{"/api/credit?model=linear&from=0001-01-01&to=2026-10-01", `from: "0001-01-01" is outside the event times`},
		{"/api/credit?model=markov&order=two", "not a whole number"},
		{"/api/credit?model=linear&last=abc", "last"},
		{"/api/credit?model=linear&last=0s", "last: must be positive"},
		{"/api/credit?model=linear&last=-1d", "sign"},
		{"/api/credit?model=linear&last=7d&from=2026-10-01", "either last or from/to"},
		{"/api/credit?model=linear&to=2026-10-01", "to: needs from"},
		{"/api/credit?model=linear&from=2026-10-05&to=2026-10-01", "window is empty"},
		{"/api/credit?model=linear&from=2099-01-01", "from: 2099-01-01T00:00:00Z is after the latest event"},
		{"/api/credit?model=linear&from=yesterday", "neither an RFC 3339 time"},
		{"/api/credit?model=linear&modle=linear", "modle: unknown parameter for credit"},
		{"/api/credit?model=linear&model=markov", "given 2 times"},
		{"/api/credit?model=linear&format=xml", "unknown format"},
		{"/api/credit?model=linear&format=table", "unknown format"},
		{"/api/shift?model=linear&days=0", "days: must be at least 1"},
		{"/api/shift?model=linear&last=7d", "last: unknown parameter for shift"},
		{"/api/transitions", "level: is required"},
		{"/api/transitions?level=page", "unknown level"},
		{"/api/paths?level=action&top=0", "top: must be at least 1"},
		{"/api/alerts?points=maybe", "not a boolean"},
		{"/api/funnel?level=action", "level: unknown parameter for funnel"},
		{"/api/status?last=1x", "last"},
	}
	for _, c := range cases {
		resp, body := f.get(t, c.path)
		if resp.StatusCode != http.StatusBadRequest {
			t.Errorf("%s: status %d, want 400 (%s)", c.path, resp.StatusCode, body)
			continue
		}
		var e struct{ Error string }
		if err := json.Unmarshal(body, &e); err != nil || resp.Header.Get("Content-Type") != "application/json" {
			t.Errorf("%s: error body %q is not JSON (%v)", c.path, body, err)
			continue
		}
		if !strings.Contains(e.Error, c.wantInError) {
			t.Errorf("%s: error %q, want it to mention %q", c.path, e.Error, c.wantInError)
		}
	}
}

func TestAPIWithoutData(t *testing.T) {
	st, err := state.Open(context.Background(), state.DefaultOptions(t.TempDir()))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	open := func() (*query.Querier, error) { return query.NewQuerier(st, query.Params{}) }
	srv := httptest.NewServer(web.NewHandler(web.Options{OpenQuerier: open}))
	defer srv.Close()
	cases := []struct {
		path string
		want int
	}{
		{"/api/status", http.StatusServiceUnavailable},
		{"/api/credit?model=linear", http.StatusServiceUnavailable},
		{"/api/credit", http.StatusBadRequest}, // parameters are checked first
		{"/api/nothing", http.StatusNotFound},
		{"/metrics", http.StatusNotFound}, // no gatherer configured
		{"/healthz", http.StatusOK},
		{"/readyz", http.StatusOK}, // no readiness func: ready
	}
	for _, c := range cases {
		resp, body := get(t, srv.URL+c.path)
		if resp.StatusCode != c.want {
			t.Errorf("%s: status %d, want %d (%s)", c.path, resp.StatusCode, c.want, body)
		}
	}
	_, body := get(t, srv.URL+"/api/status")
	var e struct{ Error string }
	if err := json.Unmarshal(body, &e); err != nil || !strings.Contains(e.Error, query.ErrNoData.Error()) {
		t.Errorf("no-data answer %q (%v), want the ErrNoData message", body, err)
	}
	post, err := http.Post(srv.URL+"/api/status", "application/json", strings.NewReader("{}"))
	if err != nil {
		t.Fatal(err)
	}
	post.Body.Close()
	if post.StatusCode != http.StatusMethodNotAllowed {
		t.Errorf("POST /api/status: status %d, want 405", post.StatusCode)
	}
}

// failingSource is a query.Source whose reads fail, for the 500 path.
type failingSource struct{}

var errDisk = errors.New("disk on fire")

func (failingSource) Latest() (time.Time, bool, error) {
	return time.Date(2026, 10, 1, 0, 0, 0, 0, time.UTC), true, nil
}
func (failingSource) Sum(query.Plan, tally.Family) (tally.Table, error) { return nil, errDisk }
func (failingSource) Buckets(int, tally.Family, int64, int64) (map[int64]tally.Table, error) {
	return nil, errDisk
}
func (failingSource) Close() {}

func TestAPIStorageErrorIs500(t *testing.T) {
	res := state.DefaultOptions("").Resolutions
	open := func() (*query.Querier, error) { return query.NewQuerierFrom(failingSource{}, res, query.Params{}) }
	srv := httptest.NewServer(web.NewHandler(web.Options{OpenQuerier: open}))
	defer srv.Close()
	resp, body := get(t, srv.URL+"/api/credit?model=linear")
	if resp.StatusCode != http.StatusInternalServerError || !strings.Contains(string(body), errDisk.Error()) {
		t.Errorf("status %d body %s, want 500 naming the storage error", resp.StatusCode, body)
	}
}

// fakeStatus is a StatusSource with a fixed number of commits.
type fakeStatus struct{ commits int }

func (f fakeStatus) Status() pipeline.Status { return pipeline.Status{Commits: f.commits} }

func TestReadiness(t *testing.T) {
	cases := []struct {
		name    string
		commits int
		idle    func(context.Context) bool
		want    int
	}{
		{"committed", 1, nil, http.StatusOK},
		{"no commit, input waiting", 0, func(context.Context) bool { return false }, http.StatusServiceUnavailable},
		{"no commit, unknown input", 0, nil, http.StatusServiceUnavailable},
		{"no commit, no input yet", 0, func(context.Context) bool { return true }, http.StatusOK},
	}
	for _, c := range cases {
		h := web.NewHandler(web.Options{Ready: web.ReadyAfterCommit(fakeStatus{c.commits}, c.idle)})
		rec := httptest.NewRecorder()
		h.ServeHTTP(rec, httptest.NewRequest(http.MethodGet, "/readyz", nil))
		if rec.Code != c.want {
			t.Errorf("%s: /readyz %d, want %d (%s)", c.name, rec.Code, c.want, rec.Body)
		}
		rec = httptest.NewRecorder()
		h.ServeHTTP(rec, httptest.NewRequest(http.MethodGet, "/healthz", nil))
		if rec.Code != http.StatusOK {
			t.Errorf("%s: /healthz %d, want 200", c.name, rec.Code)
		}
	}
}

func TestToken(t *testing.T) {
	const token = "s3cret-token"
	f := newFixture(t, web.Options{Token: token, Ready: func(context.Context) error { return nil }})
	cases := []struct {
		path, auth string
		want       int
	}{
		{"/api/status", "", http.StatusUnauthorized},
		{"/api/status", "Bearer wrong", http.StatusUnauthorized},
		{"/api/status", "Basic " + token, http.StatusUnauthorized},
		{"/api/status", "Bearer " + token + "x", http.StatusUnauthorized},
		{"/api/status", "Bearer " + token, http.StatusOK},
		{"/api/status", "bearer " + token, http.StatusOK},
		{"/metrics", "", http.StatusUnauthorized},
		{"/metrics", "Bearer " + token, http.StatusOK},
		{"/readyz", "", http.StatusUnauthorized},
		{"/readyz", "Bearer " + token, http.StatusOK},
		{"/api/nothing", "", http.StatusUnauthorized}, // no probing without the token
		{"/healthz", "", http.StatusOK},
	}
	for _, c := range cases {
		var hdr []string
		if c.auth != "" {
			hdr = []string{"Authorization", c.auth}
		}
		resp, body := f.get(t, c.path, hdr...)
		if resp.StatusCode != c.want {
			t.Errorf("%s with %q: status %d, want %d (%s)", c.path, c.auth, resp.StatusCode, c.want, body)
		}
		if c.want == http.StatusUnauthorized && !strings.HasPrefix(resp.Header.Get("WWW-Authenticate"), "Bearer") {
			t.Errorf("%s: 401 without a Bearer challenge", c.path)
		}
	}
}

// TestMetricsScrape scrapes /metrics over HTTP: the counters equal the
// replay's committed counts, and promtool (Debian's prometheus package)
// accepts the text.
func TestMetricsScrape(t *testing.T) {
	f := newFixture(t, web.Options{})
	resp, body := f.get(t, "/metrics")
	if resp.StatusCode != http.StatusOK {
		t.Fatalf("/metrics: status %d: %s", resp.StatusCode, body)
	}
	parser := expfmt.NewTextParser(model.UTF8Validation)
	fams, err := parser.TextToMetricFamilies(bytes.NewReader(body))
	if err != nil {
		t.Fatalf("parse scraped text: %v", err)
	}
	value := func(name, label, lv string) float64 {
		for _, m := range fams[name].GetMetric() {
			for _, l := range m.GetLabel() {
				if l.GetName() == label && l.GetValue() == lv {
					if m.Counter != nil {
						return m.Counter.GetValue()
					}
					return m.Gauge.GetValue()
				}
			}
		}
		t.Fatalf("%s{%s=%q} not scraped", name, label, lv)
		return 0
	}
	c := f.cp.Counts
	if c.Accepted == 0 || c.Rejected[event.ReasonBadJSON] != 1 {
		t.Fatalf("fixture counts %+v: want accepted events and one bad_json", c)
	}
	cases := []struct {
		name, label, value string
		want               uint64
	}{
		{"touchledger_events_total", "outcome", "accepted", c.Accepted},
		{"touchledger_events_total", "outcome", "duplicate", c.Duplicate},
		{"touchledger_events_total", "outcome", "late", c.Late},
		{"touchledger_events_total", "outcome", "rejected", c.RejectedTotal()},
		{"touchledger_rejects_total", "reason", "bad_json", c.Rejected[event.ReasonBadJSON]},
		{"touchledger_build_info", "version", "v1.2.3", 1},
		{"touchledger_build_info", "revision", "0123abc", 1},
	}
	for _, k := range cases {
		if got := value(k.name, k.label, k.value); got != float64(k.want) {
			t.Errorf("%s{%s=%q} = %v, want %d", k.name, k.label, k.value, got, k.want)
		}
	}
	// Credit labels are capped at MaxChannels (4) per model.
	perModel := map[string]int{}
	for _, m := range fams["touchledger_credited_conversions"].GetMetric() {
		for _, l := range m.GetLabel() {
			if l.GetName() == "model" {
				perModel[l.GetValue()]++
			}
		}
	}
	if len(perModel) != 8 {
		t.Errorf("credited_conversions for %d models, want 8: %v", len(perModel), perModel)
	}
	for m, n := range perModel {
		if n != 4 {
			t.Errorf("model %s has %d channel label values, want 4", m, n)
		}
	}
	if h := fams["touchledger_commit_duration_seconds"].GetMetric(); len(h) != 1 || h[0].GetHistogram().GetSampleCount() != uint64(f.proc.Status().Commits) {
		t.Errorf("commit_duration_seconds: %v, want %d observations", h, f.proc.Status().Commits)
	}
	promtoolCheck(t, body)
}

func promtoolCheck(t *testing.T, text []byte) {
	t.Helper()
	path, err := exec.LookPath("promtool")
	if err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("promtool not on PATH (install Debian's prometheus package): %v", err)
		}
		t.Skip("promtool not on PATH: install Debian's prometheus package (apt-get install prometheus) to check the metric text")
	}
	cmd := exec.Command(path, "check", "metrics")
	cmd.Stdin = bytes.NewReader(text)
	out, err := cmd.CombinedOutput()
	if err != nil {
		t.Errorf("promtool check metrics: %v\n%s", err, out)
	}
}

func TestServerOnLoopback(t *testing.T) {
	ln, err := web.Listen(context.Background(), "127.0.0.1:0", "")
	if err != nil {
		t.Fatal(err)
	}
	srv := web.NewServer(ln.Addr().String(), web.NewHandler(web.Options{}))
	done := make(chan error, 1)
	go func() { done <- srv.Serve(ln) }()
	defer func() {
		srv.Shutdown(context.Background())
		if err := <-done; !errors.Is(err, http.ErrServerClosed) {
			t.Errorf("serve: %v", err)
		}
	}()
	base := "http://" + ln.Addr().String()
	resp, body := get(t, base+"/healthz")
	if resp.StatusCode != http.StatusOK || string(body) != "ok\n" {
		t.Errorf("/healthz: %d %q", resp.StatusCode, body)
	}
	resp, _ = get(t, base+"/healthz", "X-Padding", strings.Repeat("x", web.MaxHeaderBytes+8192))
	if resp.StatusCode != http.StatusRequestHeaderFieldsTooLarge {
		t.Errorf("oversized header: status %d, want 431", resp.StatusCode)
	}
	limits := []struct {
		name string
		got  time.Duration
	}{{"ReadHeaderTimeout", srv.ReadHeaderTimeout}, {"ReadTimeout", srv.ReadTimeout},
		{"WriteTimeout", srv.WriteTimeout}, {"IdleTimeout", srv.IdleTimeout}}
	for _, l := range limits {
		if l.got <= 0 {
			t.Errorf("%s not set", l.name)
		}
	}
	if srv.MaxHeaderBytes != web.MaxHeaderBytes {
		t.Errorf("MaxHeaderBytes = %d, want %d", srv.MaxHeaderBytes, web.MaxHeaderBytes)
	}
}

func TestCheckListen(t *testing.T) {
	cases := []struct {
		addr, token string
		want        error // nil, ErrExposed, or errAddr for a malformed address
	}{
		{"127.0.0.1:9464", "", nil},
		{"127.8.9.10:9464", "", nil},
		{"localhost:9464", "", nil},
		{"[::1]:9464", "", nil},
		{":9464", "", web.ErrExposed},
		{"0.0.0.0:9464", "", web.ErrExposed},
		{"[::]:9464", "", web.ErrExposed},
		{"10.1.2.3:9464", "", web.ErrExposed},
		{"metrics.example:9464", "", web.ErrExposed},
		{"0.0.0.0:9464", "tok", nil},
		{"9464", "", errAddr},
	}
	for _, c := range cases {
		err := web.CheckListen(c.addr, c.token)
		switch {
		case c.want == nil && err != nil:
			t.Errorf("CheckListen(%q, %q) = %v, want nil", c.addr, c.token, err)
		case c.want == web.ErrExposed && !errors.Is(err, web.ErrExposed):
			t.Errorf("CheckListen(%q, %q) = %v, want ErrExposed", c.addr, c.token, err)
		case c.want == errAddr && (err == nil || errors.Is(err, web.ErrExposed)):
			t.Errorf("CheckListen(%q, %q) = %v, want an address error", c.addr, c.token, err)
		}
	}
	if _, err := web.Listen(context.Background(), "0.0.0.0:0", ""); !errors.Is(err, web.ErrExposed) {
		t.Errorf("Listen on all interfaces without a token: %v, want ErrExposed", err)
	}
}

var errAddr = errors.New("malformed address")

func TestFormatNegotiation(t *testing.T) {
	f := newFixture(t, web.Options{})
	cases := []struct {
		accept, want string
	}{
		{"", "application/json"},
		{"*/*", "application/json"},
		{"text/html,application/xhtml+xml,*/*;q=0.8", "application/json"},
		{"text/csv", "text/csv; charset=utf-8"},
		{"TEXT/CSV", "text/csv; charset=utf-8"},
		{"application/json;q=0.4, text/csv;q=0.9", "text/csv; charset=utf-8"},
		{"text/csv;q=0.9, application/json", "application/json"},
		{"text/csv, application/json", "text/csv; charset=utf-8"}, // tie: the first listed
		{"text/csv;q=0", "application/json"},
		{"text/csv;q=abc", "application/json"},
		{"application/xml", "application/json"},
	}
	for _, c := range cases {
		var hdr []string
		if c.accept != "" {
			hdr = []string{"Accept", c.accept}
		}
		resp, body := f.get(t, "/api/funnel", hdr...)
		if resp.StatusCode != http.StatusOK {
			t.Fatalf("Accept %q: status %d: %s", c.accept, resp.StatusCode, body)
		}
		if got := resp.Header.Get("Content-Type"); got != c.want {
			t.Errorf("Accept %q: Content-Type %q, want %q", c.accept, got, c.want)
		}
	}
}

// The concurrency bound: with one slot held by a slow request, a second
// request whose client gives up gets 503 instead of piling up.
func TestAPIInFlightBound(t *testing.T) {
	release := make(chan struct{})
	entered := make(chan struct{}, 1)
	open := func() (*query.Querier, error) {
		entered <- struct{}{}
		<-release
		return nil, query.ErrNoData
	}
	h := web.NewHandler(web.Options{OpenQuerier: open, MaxInFlight: 1})
	first := make(chan int, 1)
	go func() {
		rec := httptest.NewRecorder()
		h.ServeHTTP(rec, httptest.NewRequest(http.MethodGet, "/api/status", nil))
		first <- rec.Code
	}()
	<-entered
	ctx, cancel := context.WithTimeout(context.Background(), 50*time.Millisecond)
	defer cancel()
	rec := httptest.NewRecorder()
	h.ServeHTTP(rec, httptest.NewRequest(http.MethodGet, "/api/status", nil).WithContext(ctx))
	if rec.Code != http.StatusServiceUnavailable || !strings.Contains(rec.Body.String(), "waiting") {
		t.Errorf("second request: %d %s, want 503 while the slot is held", rec.Code, rec.Body)
	}
	close(release)
	if code := <-first; code != http.StatusServiceUnavailable {
		t.Errorf("first request: %d, want 503 (no data)", code)
	}
}

// TestPageMountedAndTokenByBasicAuth: the dashboard handler answers "/" and
// "/static/", and with a token a browser's Basic authentication (password =
// token) is accepted as well as a bearer header.
func TestPageMountedAndTokenByBasicAuth(t *testing.T) {
	page := http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) { io.WriteString(w, "page "+r.URL.Path) })
	h := web.NewHandler(web.Options{Page: page, Token: "s3cret"})
	for _, c := range []struct {
		path, user, pass, bearer string
		code                     int
	}{
		{"/", "", "", "", http.StatusUnauthorized},
		{"/", "anyone", "s3cret", "", http.StatusOK},
		{"/static/dashboard.css", "", "", "s3cret", http.StatusOK},
		{"/", "anyone", "wrong", "", http.StatusUnauthorized},
		{"/healthz", "", "", "", http.StatusOK},
	} {
		req := httptest.NewRequest(http.MethodGet, c.path, nil)
		if c.pass != "" {
			req.SetBasicAuth(c.user, c.pass)
		}
		if c.bearer != "" {
			req.Header.Set("Authorization", "Bearer "+c.bearer)
		}
		rec := httptest.NewRecorder()
		h.ServeHTTP(rec, req)
		if rec.Code != c.code {
			t.Errorf("%s (%q/%q/%q): %d, want %d", c.path, c.user, c.pass, c.bearer, rec.Code, c.code)
		}
	}
}
