package main

import (
	"context"
	"encoding/json"
	"io"
	"net/http"
	"net/http/httptest"
	"net/url"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/micro"

	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/remote"
	"github.com/touchledger/touchledger/internal/state"
	"github.com/touchledger/touchledger/internal/testsupport"
	"github.com/touchledger/touchledger/internal/web"
)

// surfaceCases are the same questions asked on every surface: the
// parameters as the CLI's flags (without "--"), the HTTP API's query
// parameters and a NATS ask request's params. bad names the parameter a
// refusal must name ("" = answered).
var surfaceCases = []struct {
	kind   string
	params map[string]string
	bad    string
}{
	{"credit", map[string]string{"model": "linear", "last": "7d"}, ""},
	{"credit", map[string]string{"model": "last-marketing", "by": "campaign", "last": "3d"}, ""},
	{"credit", map[string]string{"model": "markov", "order": "2", "from": "2026-10-03", "to": "2026-10-06T12:00:00+02:00"}, ""},
	{"credit", map[string]string{"model": "shapley", "last": "1d12h"}, ""},
	{"shift", map[string]string{"model": "position-based", "days": "4"}, ""},
	{"transitions", map[string]string{"level": "channel", "order": "2", "last": "7d"}, ""},
	{"transitions", map[string]string{"level": "action", "last": "7d"}, ""},
	{"paths", map[string]string{"level": "action", "top": "3", "last": "7d"}, ""},
	{"funnel", map[string]string{"last": "7d"}, ""},
	{"alerts", map[string]string{"last": "2d", "points": ""}, ""},
	{"status", map[string]string{"from": "2026-10-02"}, ""},

	{"credit", map[string]string{}, "model"},
	{"credit", map[string]string{"model": "hunch"}, "model"},
	{"credit", map[string]string{"model": "linear", "order": "2"}, "order"},
	{"credit", map[string]string{"model": "markov", "order": "4"}, "order"}, // markov_max_order is 3
	{"credit", map[string]string{"model": "shapley", "by": "campaign"}, "by"},
	{"credit", map[string]string{"model": "linear", "top": "3"}, "top"},
	{"credit", map[string]string{"model": "linear", "from": "0001-01-01", "to": "2026-10-01"}, "from"},
	{"credit", map[string]string{"model": "linear", "to": "2026-10-01"}, "to"},
	{"credit", map[string]string{"model": "linear", "last": "7 days"}, "last"},
	{"shift", map[string]string{"model": "linear", "from": "2026-10-01"}, "from"},
	{"shift", map[string]string{"model": "linear", "days": "0"}, "days"},
	{"transitions", map[string]string{"level": "action", "order": "2"}, "order"},
	{"paths", map[string]string{"level": "page"}, "level"},
	{"funnel", map[string]string{"from": "2026-10-05", "to": "2026-10-01"}, "from"},
	{"alerts", map[string]string{"points": "maybe"}, "points"},
}

// verdict is what one surface said: an answer's JSON, or a refusal's
// message.
type verdict struct {
	ok      bool
	answer  any
	message string
}

// TestSurfacesAgree: the CLI (over NATS, merging tables), the HTTP API and
// the NATS ask endpoint accept and refuse the same requests, refuse them
// with the same message naming the same parameter, and give the same
// answers. The expected verdicts are this project's rules (query.Request).
func TestSurfacesAgree(t *testing.T) {
	dir := replayDemo(t)
	cfg := config.Default()
	st, err := state.Open(context.Background(), pipeline.StoreOptions(dir, cfg))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { st.Close() })
	params := query.ParamsFrom(cfg)
	s := testsupport.StartNATS(t, testsupport.NATSOptions{})
	nc, err := nats.Connect(s.ClientURL())
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(nc.Close)
	svc, err := remote.Register(nc, "tl", 0, 15, st, st.Resolutions(), params)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { svc.Stop() })
	srv := httptest.NewServer(web.NewHandler(web.Options{OpenQuerier: func() (*query.Querier, error) { return query.NewQuerier(st, params) }}))
	t.Cleanup(srv.Close)

	viaCLI := func(kind string, p map[string]string) verdict {
		args := []string{kind, "--nats", s.ClientURL(), "--format", "json", "--timeout", "10s"}
		for k, v := range p {
			if k == "points" && v == "" {
				args = append(args, "--points")
				continue
			}
			args = append(args, "--"+k+"="+v)
		}
		code, out, errOut := runCLI(args...)
		switch code {
		case 0:
			var a any
			if err := json.Unmarshal([]byte(out), &a); err != nil {
				t.Fatalf("%v: output is not JSON: %v", args, err)
			}
			return verdict{ok: true, answer: a}
		case 2:
			// "query credit: model: ..." after the configuration note.
			lines := strings.Split(strings.TrimSpace(errOut), "\n")
			return verdict{message: strings.TrimPrefix(lines[len(lines)-1], "query "+kind+": ")}
		}
		t.Fatalf("%v: exit %d: %s", args, code, errOut)
		return verdict{}
	}
	viaHTTP := func(kind string, p map[string]string) verdict {
		v := url.Values{}
		for k, x := range p {
			v.Set(k, x)
		}
		resp, err := http.Get(srv.URL + "/api/" + kind + "?" + v.Encode())
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		body, _ := io.ReadAll(resp.Body)
		switch resp.StatusCode {
		case http.StatusOK:
			var a any
			if err := json.Unmarshal(body, &a); err != nil {
				t.Fatal(err)
			}
			return verdict{ok: true, answer: a}
		case http.StatusBadRequest:
			var e struct{ Error string }
			if err := json.Unmarshal(body, &e); err != nil {
				t.Fatal(err)
			}
			return verdict{message: e.Error}
		}
		t.Fatalf("GET /api/%s?%s: status %d: %s", kind, v.Encode(), resp.StatusCode, body)
		return verdict{}
	}
	viaNATS := func(kind string, p map[string]string) verdict {
		body, _ := json.Marshal(remote.AskRequest{Kind: kind, Params: p})
		m, err := nc.Request(remote.AskSubject("tl", 0, 15), body, 10*time.Second)
		if err != nil {
			t.Fatal(err)
		}
		if code := m.Header.Get(micro.ErrorCodeHeader); code != "" {
			if code != remote.CodeBadRequest {
				t.Fatalf("ask %s %v: error %s %s", kind, p, code, m.Header.Get(micro.ErrorHeader))
			}
			return verdict{message: m.Header.Get(micro.ErrorHeader)}
		}
		var a any
		if err := json.Unmarshal(m.Data, &a); err != nil {
			t.Fatal(err)
		}
		return verdict{ok: true, answer: a}
	}

	for _, c := range surfaceCases {
		cli, web, ask := viaCLI(c.kind, c.params), viaHTTP(c.kind, c.params), viaNATS(c.kind, c.params)
		name := c.kind + "?" + toQuery(c.params)
		if c.bad == "" {
			if !cli.ok || !web.ok || !ask.ok {
				t.Errorf("%s: refused (cli %q, http %q, nats %q), want answered", name, cli.message, web.message, ask.message)
				continue
			}
			if !testsupport.CloseEnough(cli.answer, web.answer) || !testsupport.CloseEnough(web.answer, ask.answer) {
				t.Errorf("%s: answers differ:\n cli  %v\n http %v\n nats %v", name, cli.answer, web.answer, ask.answer)
			}
			continue
		}
		if cli.ok || web.ok || ask.ok {
			t.Errorf("%s: answered (cli %v, http %v, nats %v), want refused naming %q", name, cli.ok, web.ok, ask.ok, c.bad)
			continue
		}
		if !strings.HasPrefix(web.message, c.bad+": ") || web.message != ask.message {
			t.Errorf("%s: http %q, nats %q: want the same message naming %q", name, web.message, ask.message, c.bad)
		}
		if cli.message != web.message {
			t.Errorf("%s: cli %q, http %q: want the same message", name, cli.message, web.message)
		}
	}
}

func toQuery(p map[string]string) string {
	v := url.Values{}
	for k, x := range p {
		v.Set(k, x)
	}
	return v.Encode()
}

// TestOneWindowEveryFamily: for a replayed file, --last 7d covers the same
// from/to in credit (every model), funnel, paths, transitions and alerts,
// and every answer says whether (and why) it was rounded.
func TestOneWindowEveryFamily(t *testing.T) {
	dir := replayDemo(t)
	var cmds [][]string
	for _, m := range query.Models() {
		cmds = append(cmds, []string{"credit", "--model", m})
	}
	cmds = append(cmds, []string{"funnel"}, []string{"paths", "--level", "action"}, []string{"paths", "--level", "channel"},
		[]string{"transitions", "--level", "channel"}, []string{"transitions", "--level", "action"}, []string{"alerts"}, []string{"status"})
	type span struct {
		From, To time.Time
		Rounded  bool
		Rounding string
	}
	var first span
	var firstCmd []string
	for _, c := range cmds {
		args := append(append([]string{}, c...), "--data", dir, "--last", "7d", "--format", "json")
		code, out, errOut := runCLI(args...)
		if code != 0 {
			t.Fatalf("%v: exit %d: %s", args, code, errOut)
		}
		var got span
		if err := json.Unmarshal([]byte(out), &got); err != nil {
			t.Fatal(err)
		}
		if got.From.IsZero() || !got.Rounded || got.Rounding == "" {
			t.Errorf("%v: window %+v: want from/to and the reason for rounding a window ending just after the latest event", c, got)
		}
		if firstCmd == nil {
			first, firstCmd = got, c
			continue
		}
		if !got.From.Equal(first.From) || !got.To.Equal(first.To) {
			t.Errorf("%v covers %s to %s, %v covers %s to %s", c, got.From, got.To, firstCmd, first.From, first.To)
		}
	}
	if d := first.To.Sub(first.From); d < 7*24*time.Hour || d > 7*24*time.Hour+2*time.Hour {
		t.Errorf("a 7d window covers %v", d)
	}
	if !slices.ContainsFunc(strings.Split(first.Rounding, "; "), func(s string) bool { return strings.Contains(s, "hour buckets") }) {
		t.Errorf("rounding %q does not name the bucket size", first.Rounding)
	}
}

// TestAlertsSayWhyShort: alerts --last 28d over data whose 5-minute buckets
// are kept 2 days covers what those buckets hold and says why (retention),
// while the credit answers of one window agree on their conversions under
// every model (one plan per request: the rule and data-driven models read
// the same buckets).
func TestAlertsSayWhyShort(t *testing.T) {
	cfgPath := filepath.Join(t.TempDir(), "tl.yaml")
	yaml := "store:\n  resolutions:\n    - {name: 5m, step: 5m, retention: 2d}\n    - {name: hour, step: 1h, retention: 90d}\n    - {name: day, step: 1d, retention: 0s}\n"
	if err := os.WriteFile(cfgPath, []byte(yaml), 0o600); err != nil {
		t.Fatal(err)
	}
	cfg, err := config.Load(cfgPath)
	if err != nil {
		t.Fatal(err)
	}
	dir := testsupport.ReplayDir(t, cfg, testsupport.DemoEvents(t))
	code, out, errOut := runCLI("alerts", "--data", dir, "--config", cfgPath, "--last", "28d", "--format", "json")
	if code != 0 {
		t.Fatalf("alerts: exit %d: %s", code, errOut)
	}
	var a struct {
		From, To time.Time
		Rounded  bool
		Rounding string
	}
	if err := json.Unmarshal([]byte(out), &a); err != nil {
		t.Fatal(err)
	}
	if span := a.To.Sub(a.From); !a.Rounded || span > 2*24*time.Hour || !strings.Contains(a.Rounding, "5m buckets, kept 2d (retention)") {
		t.Errorf("alerts over 28d with 5m buckets kept 2d: %v covered, rounded %v (%q); want at most 2 days and the retention named", span, a.Rounded, a.Rounding)
	}

	var conv []float64
	for _, m := range query.Models() {
		code, out, errOut := runCLI("credit", "--data", dir, "--config", cfgPath, "--model", m, "--last", "3d", "--format", "json")
		if code != 0 {
			t.Fatalf("credit %s: exit %d: %s", m, code, errOut)
		}
		var c struct{ Conversions float64 }
		if err := json.Unmarshal([]byte(out), &c); err != nil {
			t.Fatal(err)
		}
		conv = append(conv, c.Conversions)
	}
	for i, c := range conv {
		if c != conv[0] || c == 0 {
			t.Errorf("credit %s counts %v conversions, %s %v: one window, one count", query.Models()[i], c, query.Models()[0], conv[0])
		}
	}
}
