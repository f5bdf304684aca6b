package main

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/testsupport"
)

// replayDemo fills a data directory with the small demo world.
func replayDemo(t *testing.T) string {
	t.Helper()
	return testsupport.ReplayDir(t, config.Default(), testsupport.DemoEvents(t))
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
		{[]string{"credit", "--data", dir, "--model", "linear", "--top", "3"}, 2, "query credit: top: unknown parameter for credit (credit takes model, order, by, last, from, to)"},
		{[]string{"credit", "--data", dir, "--model", "linear", "--order", "2"}, 2, "order: applies to the markov model only"},
		{[]string{"shift", "--data", dir, "--model", "linear", "--from", "2026-10-10"}, 2, "query shift: from: unknown parameter for shift (shift takes model, order, days)"},
		{[]string{"credit", "--data", dir, "--model", "linear", "--from", "yesterday"}, 2, "neither an RFC 3339 time"},
		{[]string{"credit", "--data", dir, "--model", "linear", "--last", "7 days"}, 2, "last: invalid duration"},
		{[]string{"credit", "--data", empty, "--model", "linear"}, 1, "not a touchledger data directory"},
		{[]string{"credit", "--data", filepath.Join(empty, "nope"), "--model", "linear"}, 1, "no such file"},
		{[]string{"credit", "--model", "linear"}, 2, "--data DIR (a stopped worker's directory) or --nats URL (the running workers) is required"},
		{[]string{"credit", "--data", dir, "--nats", "nats://127.0.0.1:4222", "--model", "linear"}, 2, "--data and --nats exclude each other"},
		{[]string{"frobnicate"}, 2, "unknown command"},
		{[]string{"paths", "--data", dir}, 2, "level: is required"},
		{[]string{"funnel", "--data", dir, "--frob"}, 2, "query funnel: frob: unknown parameter for funnel (funnel takes last, from, to)"},
		{[]string{"credit", "--data", dir, "--model", "linear", "--timeout", "7 days"}, 2, "invalid duration"},
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

// TestHelpPerCommand: each command's --help lists its own flags with
// examples and none of another command's; --version works everywhere.
func TestHelpPerCommand(t *testing.T) {
	cases := []struct {
		cmd       string
		has, hasn []string
	}{
		{"credit", []string{"-model", "-order", "-by", "-last", "-from", "-to", "-chart", "Examples:", "query credit --data"}, []string{"-top", "-days", "-points", "-level", "-user"}},
		{"shift", []string{"-model", "-days", "-chart"}, []string{"-last", "-from", "-top", "-level"}},
		{"paths", []string{"-level", "-top", "-last"}, []string{"-model", "-order", "-days", "-chart"}},
		{"alerts", []string{"-points", "-last"}, []string{"-model", "-level", "-chart"}},
		{"forget", []string{"-user", "-nats"}, []string{"-model", "-last"}},
	}
	for _, c := range cases {
		code, out, errOut := runCLI(c.cmd, "--help")
		if code != 0 || errOut != "" {
			t.Errorf("%s --help: exit %d, stderr %q", c.cmd, code, errOut)
		}
		for _, h := range c.has {
			if !strings.Contains(out, "  "+h) && !strings.Contains(out, h) {
				t.Errorf("%s --help does not show %s", c.cmd, h)
			}
		}
		for _, h := range c.hasn {
			if strings.Contains(out, "  "+h+" ") || strings.Contains(out, "  "+h+"\n") {
				t.Errorf("%s --help shows %s, which %s does not take", c.cmd, h, c.cmd)
			}
		}
		code, out, _ = runCLI(c.cmd, "--version")
		if code != 0 || !strings.HasPrefix(out, "query ") {
			t.Errorf("%s --version: exit %d, %q", c.cmd, code, out)
		}
	}
	if code, out, _ := runCLI("--version"); code != 0 || !strings.HasPrefix(out, "query ") {
		t.Errorf("--version: exit %d, %q", code, out)
	}
}
