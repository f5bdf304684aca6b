package query

import (
	"errors"
	"strings"
	"testing"
	"time"
)

// TestParseRequestWindow: window parameters as every surface receives them.
// The cases are this package's rules (doc comments of ParseRequest and
// Span.Validate), not published values.
func TestParseRequestWindow(t *testing.T) {
	day := 24 * time.Hour
	cases := []struct {
		params map[string]string
		want   Span
		param  string // "" = accepted; else the parameter the error names
	}{
		{map[string]string{}, Span{}, ""},
		{map[string]string{"last": "7d"}, Span{Last: 7 * day}, ""},
		{map[string]string{"last": "1d12h"}, Span{Last: 36 * time.Hour}, ""},
		{map[string]string{"last": "30m"}, Span{Last: 30 * time.Minute}, ""},
		{map[string]string{"from": "2026-10-01"}, Span{From: time.Date(2026, 10, 1, 0, 0, 0, 0, time.UTC)}, ""},
		{map[string]string{"from": "2026-10-01T02:00:00+02:00", "to": "2026-10-02"}, Span{From: time.Date(2026, 10, 1, 0, 0, 0, 0, time.UTC), To: time.Date(2026, 10, 2, 0, 0, 0, 0, time.UTC)}, ""},
		{map[string]string{"from": "2026-10-01T00:00:00.5Z", "to": "2026-10-01T00:00:01Z"}, Span{From: time.Date(2026, 10, 1, 0, 0, 0, 5e8, time.UTC), To: time.Date(2026, 10, 1, 0, 0, 1, 0, time.UTC)}, ""},
		{map[string]string{"last": "0s"}, Span{}, "last"},
		{map[string]string{"last": "7"}, Span{}, "last"},
		{map[string]string{"last": "-7d"}, Span{}, "last"},
		{map[string]string{"from": "2026-10-01", "last": "7d"}, Span{}, "last"},
		{map[string]string{"to": "2026-10-01"}, Span{}, "to"},
		{map[string]string{"from": "2026-10-02", "to": "2026-10-02"}, Span{}, "from"},
		{map[string]string{"from": "2026-13-01"}, Span{}, "from"},
		{map[string]string{"from": "1 Oct 2026"}, Span{}, "from"},
		// The zero time.Time stands for "not given": an edge there is refused,
		// not read as absent.
		{map[string]string{"from": "0001-01-01", "to": "2026-10-01"}, Span{}, "from"},
		{map[string]string{"from": "1969-12-31T23:59:59Z"}, Span{}, "from"},
	}
	for _, c := range cases {
		r, err := ParseRequest(KindFunnel, c.params)
		if c.param == "" {
			if err != nil {
				t.Errorf("%v: %v, want accepted", c.params, err)
			} else if !r.Window.From.Equal(c.want.From) || !r.Window.To.Equal(c.want.To) || r.Window.Last != c.want.Last {
				t.Errorf("%v: window %+v, want %+v", c.params, r.Window, c.want)
			}
			continue
		}
		var pe *ParamError
		if !errors.As(err, &pe) || pe.Param != c.param {
			t.Errorf("%v: error %v, want a parameter error naming %q", c.params, err, c.param)
		}
	}
}

// TestValidateVerdicts: which requests are refused and which parameter the
// message names (this package's rules).
func TestValidateVerdicts(t *testing.T) {
	cases := []struct {
		kind   Kind
		params map[string]string
		param  string // "" = accepted
		says   string // part of the message
	}{
		{KindCredit, map[string]string{"model": "linear"}, "", ""},
		{KindCredit, map[string]string{"model": "markov", "order": "2"}, "", ""},
		{KindCredit, map[string]string{}, "model", "required"},
		{KindCredit, map[string]string{"model": "x"}, "model", "markov, shapley"},
		{KindCredit, map[string]string{"model": "linear", "order": "2"}, "order", "markov model only"},
		{KindCredit, map[string]string{"model": "markov", "order": "9"}, "order", "1 to 4"},
		{KindCredit, map[string]string{"model": "shapley", "by": "campaign"}, "by", "channels only"},
		{KindCredit, map[string]string{"model": "linear", "top": "3"}, "top", "unknown parameter"},
		{KindFunnel, map[string]string{"model": "linear"}, "model", "unknown parameter"},
		{KindShift, map[string]string{"model": "linear", "from": "2026-10-10"}, "from", "unknown parameter"},
		{KindShift, map[string]string{"model": "linear", "days": "0"}, "days", "at least 1"},
		{KindShift, map[string]string{"model": "linear", "days": "3661"}, "days", "1 to 3660"},
		{KindTransitions, map[string]string{"level": "action", "order": "2"}, "order", "level channel only"},
		{KindTransitions, map[string]string{"level": "x"}, "level", "channel or action"},
		{KindPaths, map[string]string{"level": "action", "top": "ten"}, "top", "whole number"},
		{KindAlerts, map[string]string{"points": "maybe"}, "points", "boolean"},
		{KindAlerts, map[string]string{"points": ""}, "", ""},
		{KindScorecard, map[string]string{}, "truth", "required"},
		{Kind("nope"), map[string]string{}, "kind", "unknown question"},
	}
	for _, c := range cases {
		_, err := ParseRequest(c.kind, c.params)
		if c.param == "" {
			if err != nil {
				t.Errorf("%s %v: %v, want accepted", c.kind, c.params, err)
			}
			continue
		}
		var pe *ParamError
		if !errors.As(err, &pe) || pe.Param != c.param || !strings.Contains(err.Error(), c.says) || !strings.HasPrefix(err.Error(), c.param+": ") {
			t.Errorf("%s %v: error %v, want one naming %q and saying %q", c.kind, c.params, err, c.param, c.says)
		}
	}
}

// FuzzParseRequest: parameters never panic, and an accepted request passes
// Validate and has a well-formed window.
func FuzzParseRequest(f *testing.F) {
	f.Add("credit", "linear", "7d", "", "", "1")
	f.Add("credit", "markov", "", "2026-10-01", "2026-10-02T12:00:00+02:00", "2")
	f.Add("funnel", "", "1d12h", "", "", "")
	f.Add("shift", "linear", "", "0001-01-01", "", "")
	f.Fuzz(func(t *testing.T, kind, model, last, from, to, order string) {
		p := map[string]string{}
		for k, v := range map[string]string{"model": model, "last": last, "from": from, "to": to, "order": order} {
			if v != "" {
				p[k] = v
			}
		}
		r, err := ParseRequest(Kind(kind), p)
		if err != nil {
			if !IsParamError(err) {
				t.Fatalf("error %v is not a parameter error", err)
			}
			return
		}
		if err := r.Validate(); err != nil {
			t.Fatalf("accepted request fails Validate: %v", err)
		}
		s := r.Window
		if !s.From.IsZero() && !s.To.IsZero() && !s.From.Before(s.To) {
			t.Fatalf("empty window %v..%v accepted", s.From, s.To)
		}
	})
}
