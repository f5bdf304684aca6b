package web

import (
	"errors"
	"fmt"
	"mime"
	"net/http"
	"net/url"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/query"
)

// ParseTime reads a window edge the way `query --from/--to` does: an RFC 3339
// time (any zone, returned in UTC) or a date, meaning 00:00 UTC.
func ParseTime(s string) (time.Time, error) {
	t, err := time.Parse(time.RFC3339Nano, s)
	if err == nil {
		t = t.UTC()
	} else if t, err = time.Parse("2006-01-02", s); err != nil {
		return time.Time{}, fmt.Errorf("%q is neither an RFC 3339 time (2026-10-01T12:00:00Z) nor a date (2026-10-01)", s)
	}
	// Event times lie in these years (the clock guard, internal/pipeline):
	// 0001-01-01, the zero time, would otherwise read as "not given".
	if t.Before(earliestTime) || !t.Before(latestTime) {
		return time.Time{}, fmt.Errorf("%q is outside the event times, 1970-01-01 to 2099-12-31 (leave from out to start at the beginning)", s)
	}
	return t, nil
}

var (
	earliestTime = time.Date(1970, 1, 1, 0, 0, 0, 0, time.UTC)
	latestTime   = time.Date(2100, 1, 1, 0, 0, 0, 0, time.UTC)
)

// ParseSpan reads the window parameters last, from and to (empty = not
// given) with the rules of `query`: last is a duration such as 7d or 12h
// ending at the latest event; from/to are ParseTime values, to exclusive and
// defaulting to just after the latest event; no window means the last 30
// days. It rejects what the querier would reject later (both forms, to
// without from, an empty window, last 0), so every window error is the
// caller's.
func ParseSpan(from, to, last string) (query.Span, error) {
	var s query.Span
	var err error
	if last != "" {
		if s.Last, err = config.ParseDuration(last); err != nil {
			return s, fmt.Errorf("last: %w", err)
		}
		if s.Last == 0 {
			return s, errors.New("last must be positive")
		}
	}
	if from != "" {
		if s.From, err = ParseTime(from); err != nil {
			return s, fmt.Errorf("from: %w", err)
		}
	}
	if to != "" {
		if s.To, err = ParseTime(to); err != nil {
			return s, fmt.Errorf("to: %w", err)
		}
	}
	switch {
	case s.Last > 0 && (from != "" || to != ""):
		return s, errors.New("give either last or from/to, not both")
	case to != "" && from == "":
		return s, errors.New("to needs from")
	case from != "" && to != "" && !s.From.Before(s.To):
		return s, errors.New("the window is empty: from must be before to")
	}
	return s, nil
}

// badRequest marks an error caused by the request's parameters.
type badRequest struct{ err error }

func (b badRequest) Error() string { return b.err.Error() }
func (b badRequest) Unwrap() error { return b.err }

func badf(format string, a ...any) error { return badRequest{fmt.Errorf(format, a...)} }

// params reads one request's query parameters. Each parameter may appear
// once; parameters an endpoint does not take are refused, so a misspelt
// name never silently falls back to a default.
type params struct {
	v url.Values
}

func newParams(v url.Values, allowed []string) (*params, error) {
	names := make([]string, 0, len(v))
	for name := range v {
		names = append(names, name)
	}
	slices.Sort(names)
	for _, name := range names {
		if name != "format" && !slices.Contains(allowed, name) {
			if len(allowed) == 0 {
				return nil, badf("unknown parameter %q: this endpoint takes only format", name)
			}
			return nil, badf("unknown parameter %q (takes %s, format)", name, strings.Join(allowed, ", "))
		}
		if len(v[name]) > 1 {
			return nil, badf("parameter %q given %d times", name, len(v[name]))
		}
	}
	return &params{v: v}, nil
}

func (p *params) str(name string) string { return p.v.Get(name) }

func (p *params) has(name string) bool { return p.v.Has(name) }

// intIn reads an integer in [lo, hi], def when absent.
func (p *params) intIn(name string, def, lo, hi int) (int, error) {
	if !p.has(name) {
		return def, nil
	}
	n, err := strconv.Atoi(p.str(name))
	if err != nil {
		return 0, badf("%s: %q is not an integer", name, p.str(name))
	}
	if n < lo || n > hi {
		return 0, badf("%s must be %d to %d, got %d", name, lo, hi, n)
	}
	return n, nil
}

// flag reads a boolean; a bare name (?points) is true.
func (p *params) flag(name string) (bool, error) {
	if !p.has(name) {
		return false, nil
	}
	s := p.str(name)
	if s == "" {
		return true, nil
	}
	b, err := strconv.ParseBool(s)
	if err != nil {
		return false, badf("%s: %q is not a boolean (use 1, 0, true or false)", name, s)
	}
	return b, nil
}

func (p *params) span() (query.Span, error) {
	s, err := ParseSpan(p.str("from"), p.str("to"), p.str("last"))
	if err != nil {
		return s, badRequest{err}
	}
	return s, nil
}

var windowParams = []string{"last", "from", "to"}

// Media types of the answers.
const (
	contentJSON = "application/json"
	contentCSV  = "text/csv; charset=utf-8"
)

// responseFormat picks JSON or CSV: the format parameter when given (json or
// csv), else the Accept header's preference between application/json and
// text/csv (highest q wins, the earlier one on a tie), else JSON.
func responseFormat(r *http.Request) (query.Format, error) {
	if v := r.URL.Query()["format"]; len(v) > 0 {
		switch query.Format(v[0]) {
		case query.JSON, query.CSV:
			return query.Format(v[0]), nil
		}
		return "", badf("unknown format %q: use json or csv", v[0])
	}
	best, bestQ := query.JSON, 0.0
	for _, part := range strings.Split(strings.Join(r.Header.Values("Accept"), ","), ",") {
		mt, ps, err := mime.ParseMediaType(strings.TrimSpace(part))
		if err != nil {
			continue
		}
		q := 1.0
		if s, ok := ps["q"]; ok {
			if q, err = strconv.ParseFloat(s, 64); err != nil || q < 0 || q > 1 {
				continue
			}
		}
		var f query.Format
		switch mt {
		case "text/csv":
			f = query.CSV
		case "application/json":
			f = query.JSON
		default:
			continue
		}
		if q > bestQ {
			best, bestQ = f, q
		}
	}
	return best, nil
}
