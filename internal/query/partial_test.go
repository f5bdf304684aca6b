package query

import (
	"bytes"
	"encoding/json"
	"strings"
	"testing"
)

func TestPartialWarning(t *testing.T) {
	cases := []struct {
		missing []int
		want    string
	}{
		{nil, ""},
		{[]int{3}, "partial answer: partition 3 did not answer"},
		{[]int{8, 9, 10, 11, 12, 13, 14, 15}, "partial answer: partitions 8-15 did not answer"},
		{[]int{15, 0, 1, 2, 7, 9, 8, 2}, "partial answer: partitions 0-2, 7-9, 15 did not answer"},
	}
	for _, c := range cases {
		if got := PartialWarning(c.missing); got != c.want {
			t.Errorf("PartialWarning(%v) = %q, want %q", c.missing, got, c.want)
		}
	}
}

// TestWritersMarkPartialAnswers: every writer puts the warning on the first
// line of table and CSV output, and JSON carries missing_partitions; a
// complete answer has neither.
func TestWritersMarkPartialAnswers(t *testing.T) {
	missing := []int{8, 9, 10, 11, 12, 13, 14, 15}
	writers := map[string]func(m []int, f Format) (string, error){
		"credit": func(m []int, f Format) (string, error) {
			var b bytes.Buffer
			err := WriteCredit(&b, CreditAnswer{Model: "linear", By: ByChannel, MissingPartitions: m}, f, false)
			return b.String(), err
		},
		"shift": func(m []int, f Format) (string, error) {
			var b bytes.Buffer
			err := WriteShift(&b, ShiftAnswer{Model: "linear", MissingPartitions: m}, f, false)
			return b.String(), err
		},
		"transitions": func(m []int, f Format) (string, error) {
			var b bytes.Buffer
			err := WriteTransitions(&b, TransitionsAnswer{Level: "action", MissingPartitions: m}, f)
			return b.String(), err
		},
		"paths": func(m []int, f Format) (string, error) {
			var b bytes.Buffer
			err := WritePaths(&b, PathsAnswer{Level: "action", MissingPartitions: m}, f)
			return b.String(), err
		},
		"funnel": func(m []int, f Format) (string, error) {
			var b bytes.Buffer
			err := WriteFunnel(&b, FunnelAnswer{MissingPartitions: m}, f)
			return b.String(), err
		},
		"alerts": func(m []int, f Format) (string, error) {
			var b bytes.Buffer
			err := WriteAlerts(&b, AlertsAnswer{Name: "checkout_abandonment", MissingPartitions: m}, f)
			return b.String(), err
		},
		"status": func(m []int, f Format) (string, error) {
			var b bytes.Buffer
			err := WriteStatus(&b, StatusAnswer{MissingPartitions: m}, f)
			return b.String(), err
		},
		"scorecard": func(m []int, f Format) (string, error) {
			var b bytes.Buffer
			err := WriteScorecard(&b, Scorecard([]CreditAnswer{{Model: "linear", MissingPartitions: m}}, Truth{}), f)
			return b.String(), err
		},
	}
	line := "partial answer: partitions 8-15 did not answer"
	for name, write := range writers {
		for _, c := range []struct {
			f         Format
			firstLine string
		}{{Table, line}, {CSV, "# " + line}} {
			out, err := write(missing, c.f)
			if err != nil {
				t.Fatalf("%s %s: %v", name, c.f, err)
			}
			if got := strings.SplitN(out, "\n", 2)[0]; got != c.firstLine {
				t.Errorf("%s %s: first line %q, want %q", name, c.f, got, c.firstLine)
			}
			full, _ := write(nil, c.f)
			if strings.Contains(full, "partial answer") {
				t.Errorf("%s %s: a complete answer is marked partial:\n%s", name, c.f, full)
			}
		}
		out, err := write(missing, JSON)
		if err != nil {
			t.Fatal(err)
		}
		var v struct {
			Missing []int `json:"missing_partitions"`
		}
		if err := json.Unmarshal([]byte(out), &v); err != nil || len(v.Missing) != len(missing) {
			t.Errorf("%s json: missing_partitions %v (%v), want %v", name, v.Missing, err, missing)
		}
		full, _ := write(nil, JSON)
		if strings.Contains(full, "missing_partitions") {
			t.Errorf("%s json: a complete answer has missing_partitions: %s", name, full)
		}
	}
}
