package web

import (
	"net/http"
	"net/http/httptest"
	"testing"

	"github.com/touchledger/touchledger/internal/query"
)

// FuzzParseSpan: window parameters never panic, and an accepted window is
// well formed (a length, or from before to).
func FuzzParseSpan(f *testing.F) {
	for _, s := range [][3]string{{"", "", "7d"}, {"2026-10-01", "2026-10-08", ""}, {"2026-10-01T10:00:00+02:00", "", ""},
		{"x", "y", "z"}, {"", "", "99999999999999999999d"}, {"2026-13-40", "", ""}} {
		f.Add(s[0], s[1], s[2])
	}
	f.Fuzz(func(t *testing.T, from, to, last string) {
		s, err := ParseSpan(from, to, last)
		if err != nil {
			return
		}
		if s.Last < 0 {
			t.Fatalf("negative length %v accepted", s.Last)
		}
		if !s.From.IsZero() && !s.To.IsZero() && !s.From.Before(s.To) && s.Last == 0 {
			t.Fatalf("empty window %v..%v accepted", s.From, s.To)
		}
	})
}

// FuzzAPIQuery: any query string on any API path gets a well-formed answer
// (never a panic, never a 5xx for bad input) from a handler with no data.
func FuzzAPIQuery(f *testing.F) {
	f.Add("/api/credit", "model=linear&last=7d")
	f.Add("/api/paths", "level=action&top=-1")
	f.Add("/api/alerts", "points=maybe&from=2026-01-01")
	f.Add("/api/transitions", "level=channel&order=99")
	h := NewHandler(Options{OpenQuerier: noData})
	f.Fuzz(func(t *testing.T, path, rawQuery string) {
		req := httptest.NewRequest(http.MethodGet, "/", nil)
		req.URL.Path = path
		req.URL.RawQuery = rawQuery
		rec := httptest.NewRecorder()
		h.ServeHTTP(rec, req)
		if rec.Code >= 500 && rec.Code != http.StatusServiceUnavailable {
			t.Fatalf("%s?%s: status %d: %s", path, rawQuery, rec.Code, rec.Body.String())
		}
	})
}

func noData() (*query.Querier, error) { return nil, query.ErrNoData }
