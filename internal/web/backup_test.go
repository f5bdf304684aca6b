package web

import (
	"io"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"

	"github.com/touchledger/touchledger/internal/query"
)

// TestBackupAlwaysNeedsAToken (issue 9 item 9): /admin/backup answers 403
// without any token configured (on the old code it returned the whole
// store to anyone on loopback), 401 without the right token, and the copy
// with it; the rest of the API stays open on loopback without a token.
func TestBackupAlwaysNeedsAToken(t *testing.T) {
	backup := func(w io.Writer) (int, error) { n, err := io.WriteString(w, "COPY"); return n, err }
	cases := []struct {
		name         string
		opts         Options
		auth         string
		path         string
		want         int
		wantBodyCopy bool
	}{
		{"no token configured", Options{Backup: backup}, "", "/admin/backup", http.StatusForbidden, false},
		{"backup token, none sent", Options{Backup: backup, BackupToken: "s3"}, "", "/admin/backup", http.StatusUnauthorized, false},
		{"backup token, wrong one", Options{Backup: backup, BackupToken: "s3"}, "Bearer nope", "/admin/backup", http.StatusUnauthorized, false},
		{"backup token sent", Options{Backup: backup, BackupToken: "s3"}, "Bearer s3", "/admin/backup", http.StatusOK, true},
		{"backup token, health open", Options{Backup: backup, BackupToken: "s3"}, "", "/healthz", http.StatusOK, false},
		{"http token covers backup", Options{Backup: backup, Token: "t1", BackupToken: "s3"}, "Bearer t1", "/admin/backup", http.StatusOK, true},
		{"http token, backup token alone is not enough", Options{Backup: backup, Token: "t1", BackupToken: "s3"}, "Bearer s3", "/admin/backup", http.StatusUnauthorized, false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			req := httptest.NewRequest(http.MethodGet, c.path, nil)
			if c.auth != "" {
				req.Header.Set("Authorization", c.auth)
			}
			rec := httptest.NewRecorder()
			NewHandler(c.opts).ServeHTTP(rec, req)
			if rec.Code != c.want || (rec.Body.String() == "COPY") != c.wantBodyCopy {
				t.Errorf("%s: %d %q, want %d (copy %v)", c.path, rec.Code, rec.Body.String(), c.want, c.wantBodyCopy)
			}
		})
	}
}

// TestZeroTimeNotIgnored (issue 9 item 10): from=0001-01-01 is an error,
// not "from not given" (it parsed to the zero time, which the querier read
// as absent); every surface uses the same parser (query.ParseRequest).
func TestZeroTimeNotIgnored(t *testing.T) {
	for _, from := range []string{"0001-01-01", "0001-01-01T00:00:00Z", "1969-12-31", "2100-01-01"} {
		if _, err := query.ParseRequest(query.KindFunnel, map[string]string{"from": from}); err == nil || !strings.Contains(err.Error(), "outside the event times") {
			t.Errorf("from=%s: %v, want an error", from, err)
		}
	}
	rec := httptest.NewRecorder()
	NewHandler(Options{OpenQuerier: func() (*query.Querier, error) { return nil, query.ErrNoData }}).
		ServeHTTP(rec, httptest.NewRequest(http.MethodGet, "/api/funnel?from=0001-01-01", nil))
	if rec.Code != http.StatusBadRequest {
		t.Errorf("/api/funnel?from=0001-01-01: %d %s, want 400", rec.Code, rec.Body.String())
	}
	if r, err := query.ParseRequest(query.KindFunnel, map[string]string{"from": "1970-01-01", "to": "2099-12-31"}); err != nil || r.Window.From.Year() != 1970 {
		t.Errorf("the edges: %v %v", r.Window, err)
	}
}
