package main

import (
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/state"
)

// replayDemo fills a data directory with a small demo replay.
func replayDemo(t *testing.T) string {
	t.Helper()
	c := shop.DefaultConfig()
	c.Visitors, c.Days, c.ShiftDay, c.IncidentDay = 2000, 7, 3, 5
	var buf bytes.Buffer
	if _, err := shop.Generate(&buf, c); err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	cfg := config.Default()
	st, err := state.Open(context.Background(), pipeline.StoreOptions(dir, cfg))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	p, err := pipeline.New(st, pipeline.FromConfig(cfg), nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := pipeline.Replay(context.Background(), p, "demo", &buf, cfg.Limits.MaxPayload); err != nil {
		t.Fatal(err)
	}
	if err := p.Close(); err != nil {
		t.Fatal(err)
	}
	return dir
}

func runCLI(args ...string) (code int, stdout, stderr string) {
	var o, e bytes.Buffer
	code = run(args, &o, &e)
	return code, o.String(), e.String()
}

// TestCommandsAnswerInEveryFormat runs every command in table, json and csv
// against a replayed directory.
func TestCommandsAnswerInEveryFormat(t *testing.T) {
	dir := replayDemo(t)
	cmds := [][]string{
		{"credit", "--model", "linear", "--last", "7d"},
		{"credit", "--model", "time-decay", "--by", "campaign", "--last", "7d"},
		{"credit", "--model", "markov", "--order", "2", "--last", "7d"},
		{"credit", "--model", "shapley", "--last", "7d"},
		{"shift", "--model", "position-based", "--days", "5"},
		{"transitions", "--level", "channel", "--last", "7d"},
		{"transitions", "--level", "action", "--last", "7d"},
		{"paths", "--level", "action", "--top", "3", "--last", "7d"},
		{"paths", "--level", "channel", "--top", "3", "--last", "7d"},
		{"funnel", "--last", "7d"},
		{"alerts", "--last", "2d", "--points"},
		{"status", "--last", "7d"},
	}
	for _, c := range cmds {
		for _, f := range []string{"table", "json", "csv"} {
			args := append([]string{c[0], "--data", dir, "--format", f}, c[1:]...)
			code, out, errOut := runCLI(args...)
			if code != 0 {
				t.Errorf("%v: exit %d: %s", args, code, errOut)
				continue
			}
			switch f {
			case "json":
				var v map[string]any
				if err := json.Unmarshal([]byte(out), &v); err != nil {
					t.Errorf("%v: not JSON: %v", args, err)
				}
			case "csv":
				rows, err := csv.NewReader(strings.NewReader(out)).ReadAll()
				if err != nil || len(rows) < 1 {
					t.Errorf("%v: bad CSV (%v): %q", args, err, out)
				}
			default:
				if strings.TrimSpace(out) == "" {
					t.Errorf("%v: empty table", args)
				}
			}
		}
	}
	// The JSON shape of issue 2: model, from, to, conversions, value, channels[channel, conversions, value, share].
	_, out, _ := runCLI("credit", "--data", dir, "--model", "linear", "--last", "7d", "--format", "json")
	var a struct {
		Model       *string
		From, To    *string
		Conversions *int64
		Value       *float64
		Channels    []struct {
			Channel     *string
			Conversions *float64
			Value       *float64
			Share       *float64
		}
	}
	if err := json.Unmarshal([]byte(out), &a); err != nil || a.Model == nil || a.From == nil || a.To == nil || a.Conversions == nil || a.Value == nil || len(a.Channels) == 0 ||
		a.Channels[0].Channel == nil || a.Channels[0].Share == nil {
		t.Errorf("credit JSON lacks the documented fields: %s", out)
	}
}

// TestClearErrors: unknown model, bad time, empty or missing directory.
func TestClearErrors(t *testing.T) {
	dir := replayDemo(t)
	empty := t.TempDir()
	cases := []struct {
		args []string
		code int
		want string
	}{
		{[]string{"credit", "--data", dir, "--model", "lastclick"}, 2, `model: unknown model "lastclick" (use one of first-touch`},
		{[]string{"credit", "--data", dir, "--model", "linear", "--top", "3"}, 2, "flag provided but not defined: -top"},
		{[]string{"credit", "--data", dir, "--model", "linear", "--order", "2"}, 2, "order: applies to the markov model only"},
		{[]string{"shift", "--data", dir, "--model", "linear", "--from", "2026-10-10"}, 2, "flag provided but not defined: -from"},
		{[]string{"credit", "--data", dir, "--model", "linear", "--from", "yesterday"}, 2, "neither an RFC 3339 time"},
		{[]string{"credit", "--data", dir, "--model", "linear", "--last", "7 days"}, 2, "last: invalid duration"},
		{[]string{"credit", "--data", empty, "--model", "linear"}, 1, "not a touchledger data directory"},
		{[]string{"credit", "--data", filepath.Join(empty, "nope"), "--model", "linear"}, 1, "no such file"},
		{[]string{"credit", "--model", "linear"}, 2, "--data DIR (a stopped worker's directory) or --nats URL (the running workers) is required"},
		{[]string{"credit", "--data", dir, "--nats", "nats://127.0.0.1:4222", "--model", "linear"}, 2, "--data and --nats exclude each other"},
		{[]string{"frobnicate"}, 2, "unknown command"},
		{[]string{"paths", "--data", dir}, 2, "level: is required"},
	}
	for _, c := range cases {
		code, _, errOut := runCLI(c.args...)
		if code != c.code || !strings.Contains(errOut, c.want) {
			t.Errorf("%v: exit %d, stderr %q; want exit %d mentioning %q", c.args, code, errOut, c.code, c.want)
		}
	}
	if entries, _ := os.ReadDir(empty); len(entries) != 0 {
		t.Errorf("querying an empty directory wrote %d files into it", len(entries))
	}
}

// TestScorecardAndForget runs the scorecard against the demo's truth file
// and erases a user from a stopped worker's directory.
func TestScorecardAndForget(t *testing.T) {
	dir := replayDemo(t)
	truth := filepath.Join(t.TempDir(), "truth.json")
	if err := os.WriteFile(truth, []byte(`{"incremental_total": 10, "channels": {"social_ads": 6, "search_ads": 4}}`), 0o644); err != nil {
		t.Fatal(err)
	}
	code, out, errOut := runCLI("scorecard", "--data", dir, "--truth", truth, "--last", "7d", "--format", "json")
	if code != 0 {
		t.Fatalf("scorecard: %s", errOut)
	}
	var sc struct {
		Channels []string
		Models   []struct {
			Model string
			Error float64
		}
	}
	if err := json.Unmarshal([]byte(out), &sc); err != nil || len(sc.Models) != 8 || len(sc.Channels) != 2 {
		t.Fatalf("scorecard answer %s (%v)", out, err)
	}
	for i := 1; i < len(sc.Models); i++ {
		if sc.Models[i].Error < sc.Models[i-1].Error {
			t.Errorf("models not ordered by error: %+v", sc.Models)
		}
	}
	code, out, errOut = runCLI("forget", "--data", dir, "--user", "v0000001")
	if code != 0 || !strings.Contains(out, "forgot v0000001") {
		t.Errorf("forget: exit %d, %q %q", code, out, errOut)
	}
}
