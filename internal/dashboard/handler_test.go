package dashboard

import (
	"errors"
	"io"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"github.com/touchledger/touchledger/internal/query"
)

func get(t *testing.T, h http.Handler, method, target string) (*http.Response, string) {
	t.Helper()
	rec := httptest.NewRecorder()
	h.ServeHTTP(rec, httptest.NewRequest(method, target, nil))
	res := rec.Result()
	body, _ := io.ReadAll(res.Body)
	return res, string(body)
}

// TestHandlerPageFromReplayedDemo serves the page from a store filled by
// replaying the demo shop and checks that every chart is drawn from the
// same answers the querier gives (checkPage), with the security headers set.
func TestHandlerPageFromReplayedDemo(t *testing.T) {
	open := sharedDemo(t)
	h := NewHandler(Options{Open: open, Title: "Lantern & Moss"})
	for _, target := range []string{"/", "/?model=markov&last=14d&days=7", "/?model=shapley&last=7d"} {
		t.Run(target, func(t *testing.T) {
			res, body := get(t, h, http.MethodGet, target)
			if res.StatusCode != http.StatusOK {
				t.Fatalf("status %d: %s", res.StatusCode, clip(body, 300))
			}
			for k, want := range map[string]string{
				"Content-Type":            "text/html; charset=utf-8",
				"Content-Security-Policy": contentSecurityPolicy,
				"X-Content-Type-Options":  "nosniff",
				"Cache-Control":           "no-store",
			} {
				if got := res.Header.Get(k); got != want {
					t.Errorf("%s = %q, want %q", k, got, want)
				}
			}
			// The same questions, asked of a fresh querier, give the numbers
			// the page must carry.
			s, err := (&handler{opts: Options{Models: query.Models()}}).parse(httptest.NewRequest(http.MethodGet, target, nil).URL.Query())
			if err != nil {
				t.Fatal(err)
			}
			q, err := open()
			if err != nil {
				t.Fatal(err)
			}
			a := Fetch(q, s, query.Models())
			q.Close()
			for _, e := range []error{a.ShiftErr, a.ChannelsErr, a.FlowErr, a.FunnelErr, a.AlertsErr} {
				if e != nil {
					t.Fatal(e)
				}
			}
			for _, m := range a.Credit {
				if m.Err != nil {
					t.Fatalf("%s: %v", m.Model, m.Err)
				}
			}
			checkPage(t, []byte(body), a)
			if strings.Contains(body, `class="error"`) {
				t.Errorf("the page shows an error")
			}
			if !strings.Contains(body, `<option value="`+s.Model+`" selected>`) {
				t.Errorf("the model control does not show %s as selected", s.Model)
			}
		})
	}
}

// TestHandlerShowsTheIncident checks the demo's story on the default page:
// the checkout outage opened an alert, drawn as a band on both abandonment
// charts, and the budget shift moved credit between search_ads and
// social_ads in the daily chart.
func TestHandlerShowsTheIncident(t *testing.T) {
	if testing.Short() {
		t.Skip("the light -short world has too few sessions per interval for the alert")
	}
	open := sharedDemo(t)
	_, body := get(t, NewHandler(Options{Open: open}), http.MethodGet, "/")
	charts := pageCharts(t, []byte(body))
	for _, id := range []string{"abandonment", "abandonment-zoom"} {
		if n := len(charts[id].all(func(n *xnode) bool { return n.attr["class"] == "alert-band" })); n == 0 {
			t.Errorf("%s: no alert band", id)
		}
	}
	// The outage starts at 15:00 UTC on the incident day (shop.DefaultConfig):
	// the alert opens within two 15-minute intervals of it.
	band := charts["abandonment"].all(func(n *xnode) bool { return n.attr["class"] == "alert-band" })
	if len(band) > 0 {
		opened, err := time.Parse(time.RFC3339, band[len(band)-1].attr["data-opened"])
		if err != nil {
			t.Fatal(err)
		}
		start := time.Date(2026, 10, 1, 15, 0, 0, 0, time.UTC).AddDate(0, 0, shared.world.Days-3)
		if opened.Before(start) || opened.After(start.Add(30*time.Minute)) {
			t.Errorf("alert opened %s, want within 30 minutes after %s", opened, start)
		}
	}
	// search_ads' share of the daily credit falls after the budget shift.
	q, err := open()
	if err != nil {
		t.Fatal(err)
	}
	defer q.Close()
	a, err := q.Shift(query.Models()[0], 1, DefaultDays)
	if err != nil {
		t.Fatal(err)
	}
	share := func(days []query.ShiftDay, ch string) float64 {
		var s float64
		for _, d := range days {
			for _, c := range d.Channels {
				if c.Channel == ch {
					s += c.Share
				}
			}
		}
		return s / float64(len(days))
	}
	half := len(a.Days) / 2
	before, after := share(a.Days[1:half], "search_ads"), share(a.Days[half+1:], "search_ads")
	if after >= before {
		t.Errorf("search_ads mean daily share %.3f after the shift, want below %.3f before it", after, before)
	}
}

// TestHandlerParameters checks the page's parameters: good ones answer
// 200, bad, unknown or repeated ones 400 with the reason.
func TestHandlerParameters(t *testing.T) {
	open := sharedDemo(t)
	h := NewHandler(Options{Open: open, Models: []string{"linear", "markov"}})
	tests := []struct {
		target string
		status int
		text   string
	}{
		{"/?model=markov&last=1d12h&days=3", http.StatusOK, `<option value="1d12h" selected>last 1d12h</option>`},
		{"/?days=90", http.StatusOK, `<option value="90" selected>90 days</option>`},
		{"/?model=first-touch", http.StatusBadRequest, "model &#34;first-touch&#34; is not shown here (choose one of linear, markov)"},
		{"/?last=abc", http.StatusBadRequest, "last:"},
		{"/?last=30s", http.StatusBadRequest, "last: must be between 1m and 3660d on this page"},
		{"/?days=0", http.StatusBadRequest, "days: must be at least 1, got 0"},
		{"/?days=91", http.StatusBadRequest, "days: must be 1 to 90 on this page, got 91"},
		{"/?days=seven", http.StatusBadRequest, "days: &#34;seven&#34; is not a whole number"},
		{"/?dayz=7", http.StatusBadRequest, "unknown parameter &#34;dayz&#34;"},
		{"/?days=7&days=8", http.StatusBadRequest, "parameter &#34;days&#34; given 2 times"},
	}
	for _, tt := range tests {
		res, body := get(t, h, http.MethodGet, tt.target)
		if res.StatusCode != tt.status || !strings.Contains(body, tt.text) {
			t.Errorf("GET %s = %d, want %d with %q:\n%s", tt.target, res.StatusCode, tt.status, tt.text, clip(body, 600))
		}
	}
}

// TestHandlerRoutes checks the other paths: the embedded stylesheet, 404
// for anything else, 405 for other methods.
func TestHandlerRoutes(t *testing.T) {
	h := NewHandler(Options{Open: func() (*query.Querier, error) { return nil, query.ErrNoData }})
	tests := []struct {
		method, target string
		status         int
		contentType    string
	}{
		{http.MethodGet, "/" + cssPath, http.StatusOK, "text/css; charset=utf-8"},
		{http.MethodHead, "/static/dashboard.css", http.StatusOK, "text/css; charset=utf-8"},
		{http.MethodGet, "/static/missing.css", http.StatusNotFound, ""},
		{http.MethodGet, "/static/", http.StatusNotFound, ""},
		{http.MethodGet, "/static/..%2fhandler.go", http.StatusNotFound, ""},
		{http.MethodGet, "/index.html", http.StatusNotFound, ""},
		{http.MethodPost, "/", http.StatusMethodNotAllowed, ""},
	}
	for _, tt := range tests {
		res, body := get(t, h, tt.method, tt.target)
		if res.StatusCode != tt.status {
			t.Errorf("%s %s = %d, want %d", tt.method, tt.target, res.StatusCode, tt.status)
		}
		if tt.contentType != "" && res.Header.Get("Content-Type") != tt.contentType {
			t.Errorf("%s %s: Content-Type %q, want %q", tt.method, tt.target, res.Header.Get("Content-Type"), tt.contentType)
		}
		if tt.status == http.StatusOK && tt.method == http.MethodGet && !strings.Contains(body, "svg.chart") {
			t.Errorf("%s %s: not the dashboard stylesheet", tt.method, tt.target)
		}
	}
}

// TestHandlerWithoutData checks the pages shown before data arrives (503,
// reloading) and when the data cannot be opened (500).
func TestHandlerWithoutData(t *testing.T) {
	tests := []struct {
		err    error
		status int
		text   string
	}{
		{query.ErrNoData, http.StatusServiceUnavailable, "No events have been committed yet."},
		{errors.New("store locked"), http.StatusInternalServerError, "Could not open the data: store locked"},
	}
	res, body := get(t, NewHandler(Options{}), http.MethodGet, "/")
	if res.StatusCode != http.StatusInternalServerError || !strings.Contains(body, "no data source") {
		t.Errorf("without Open: %d, want 500 saying so:\n%s", res.StatusCode, body)
	}
	for _, tt := range tests {
		h := NewHandler(Options{Open: func() (*query.Querier, error) { return nil, tt.err }})
		res, body := get(t, h, http.MethodGet, "/")
		if res.StatusCode != tt.status || !strings.Contains(body, tt.text) || !strings.Contains(body, `<meta http-equiv="refresh" content="30">`) {
			t.Errorf("open error %v: %d, want %d with %q and a refresh:\n%s", tt.err, res.StatusCode, tt.status, tt.text, body)
		}
	}
}
