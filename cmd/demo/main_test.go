package main

import (
	"bytes"
	"encoding/json"
	"errors"
	"flag"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

func TestRunWritesEventsTruthAndSummary(t *testing.T) {
	dir := t.TempDir()
	out, truth := filepath.Join(dir, "events.jsonl"), filepath.Join(dir, "truth.json")
	var stdout, stderr bytes.Buffer
	err := run([]string{"--out", out, "--truth", truth, "--seed", "5", "--days", "7", "--visitors", "800",
		"--start", "2027-03-01"}, &stdout, &stderr)
	if err != nil {
		t.Fatalf("run: %v (stderr %s)", err, stderr.String())
	}
	if stdout.Len() != 0 {
		t.Errorf("stdout has %d bytes, want none with --out", stdout.Len())
	}
	data, err := os.ReadFile(out)
	if err != nil {
		t.Fatal(err)
	}
	lines := bytes.Count(data, []byte("\n"))
	if lines == 0 || !bytes.HasPrefix(data, []byte(`{"id":"`)) || !bytes.Contains(data, []byte(`"time":"2027-03-0`)) {
		t.Fatalf("events file: %d lines, starts %.80q", lines, data)
	}
	summary := stderr.String()
	if strings.Count(summary, "\n") != 1 {
		t.Errorf("summary = %q, want one line", summary)
	}
	if want := " " + strconv.Itoa(lines) + " events"; !strings.Contains(summary, want) {
		t.Errorf("summary = %q, want it to contain %q", summary, want)
	}
	var tf truthFile
	b, err := os.ReadFile(truth)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &tf); err != nil {
		t.Fatalf("truth file: %v: %s", err, b)
	}
	sum := 0.0
	for _, x := range tf.IncrementalByChan {
		sum += x
	}
	if tf.Seed != 5 || len(tf.IncrementalByChan) != 7 || math.Abs(sum-tf.IncrementalTotal) > 1e-9 {
		t.Errorf("truth file = %+v (channel sum %v)", tf, sum)
	}
}

func TestRunStdoutIsDeterministic(t *testing.T) {
	args := []string{"--days", "3", "--visitors", "300", "--seed", "9"}
	var a, b, errs bytes.Buffer
	if err := run(args, &a, &errs); err != nil {
		t.Fatal(err)
	}
	if err := run(args, &b, &errs); err != nil {
		t.Fatal(err)
	}
	if a.Len() == 0 || !bytes.Equal(a.Bytes(), b.Bytes()) {
		t.Fatalf("two runs wrote %d and %d bytes, want the same non-empty output", a.Len(), b.Len())
	}
}

func TestRunRejectsBadInput(t *testing.T) {
	tests := []struct {
		name string
		args []string
		want string
	}{
		{"bad start", []string{"--start", "yesterday"}, "neither a date"},
		{"zero days", []string{"--days", "0"}, "days 0"},
		{"unknown channel", []string{"--off", "carrier_pigeons"}, "unknown channel"},
		{"extra argument", []string{"events.jsonl"}, "unexpected argument"},
		{"unknown flag", []string{"--format", "csv"}, "flag provided but not defined"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			var stdout, stderr bytes.Buffer
			err := run(tt.args, &stdout, &stderr)
			if err == nil || !strings.Contains(err.Error(), tt.want) {
				t.Fatalf("run(%v) = %v, want an error containing %q", tt.args, err, tt.want)
			}
			if stdout.Len() != 0 {
				t.Errorf("wrote %d bytes of events despite the error", stdout.Len())
			}
		})
	}
}

func TestRunHelp(t *testing.T) {
	var stdout, stderr bytes.Buffer
	err := run([]string{"--help"}, &stdout, &stderr)
	if !errors.Is(err, flag.ErrHelp) {
		t.Fatalf("run(--help) = %v, want flag.ErrHelp", err)
	}
	for _, want := range []string{"sandbox, not proof", "--visitors", "--truth", "about 1 M events"} {
		if !strings.Contains(stderr.String(), want) {
			t.Errorf("help text lacks %q:\n%s", want, stderr.String())
		}
	}
}
