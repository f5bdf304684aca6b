package dashboard

import (
	"bytes"
	"crypto/sha256"
	"embed"
	"encoding/hex"
	"errors"
	"fmt"
	"io/fs"
	"net/http"
	"net/url"
	"path"
	"slices"
	"sort"
	"strconv"
	"strings"
	"time"

	"github.com/touchledger/touchledger/internal/query"
)

// Options configure the dashboard handler.
type Options struct {
	// Open opens a fresh querier for one page; the handler closes it.
	// query.ErrNoData makes the page say that nothing has arrived yet (and
	// keep reloading). Required.
	Open func() (*query.Querier, error)
	// Models are the attribution models shown side by side, in order; the
	// first is the default of the daily chart. Default: the six rule-based
	// models, then markov and shapley.
	Models []string
	// Title heads the page. Default "touchledger".
	Title string
	// Truth, when set, is a simulated world's true effect per channel (read
	// with query.ReadTruth from a demo --truth file): the model comparison
	// draws each channel's true share as a ring beside the models' marks.
	Truth *query.Truth
}

// Parameter defaults and bounds.
const (
	DefaultDays = 14
	MaxDays     = 90
	MaxLast     = 3660 * 24 * time.Hour
	// maxInFlight bounds the pages computed at once: each holds a store
	// snapshot and runs every model.
	maxInFlight = 2
)

//go:embed static
var staticFiles embed.FS

// cssPath is the stylesheet's address with a hash of its content, so a
// browser may cache it for long and still sees a new version at once.
var cssPath = func() string {
	b, err := staticFiles.ReadFile("static/dashboard.css")
	if err != nil {
		panic(err) // embedded at build time: cannot be missing
	}
	sum := sha256.Sum256(b)
	return "static/dashboard.css?v=" + hex.EncodeToString(sum[:6])
}()

// contentSecurityPolicy lets the page load nothing but its own stylesheet:
// no scripts at all, nothing from elsewhere.
const contentSecurityPolicy = "default-src 'none'; style-src 'self'; img-src 'self' data:; form-action 'self'; base-uri 'none'; frame-ancestors 'none'"

// NewHandler serves the dashboard page at "/" (parameters model, last and
// days) and its stylesheet under "/static/". Any other path answers 404.
//
//	model  the model of the daily credit chart (one of Options.Models; default the first)
//	last   the window of the other charts, a duration such as 7d or 12h ending at the latest event (default 30d)
//	days   the days of the daily credit chart, 1 to 90 (default 14)
//
// Unknown or repeated parameters and bad values answer 400.
func NewHandler(o Options) http.Handler {
	if len(o.Models) == 0 {
		o.Models = query.Models()
	}
	if o.Title == "" {
		o.Title = "touchledger"
	}
	h := &handler{opts: o, slots: make(chan struct{}, maxInFlight)}
	static, err := fs.Sub(staticFiles, "static")
	if err != nil {
		panic(err) // the directory is embedded at build time
	}
	mux := http.NewServeMux()
	mux.Handle("GET /{$}", h)
	mux.HandleFunc("GET /static/{file}", func(w http.ResponseWriter, r *http.Request) {
		name := r.PathValue("file")
		if _, err := fs.Stat(static, name); err != nil || path.Ext(name) != ".css" {
			http.NotFound(w, r)
			return
		}
		w.Header().Set("Cache-Control", "public, max-age=86400")
		w.Header().Set("X-Content-Type-Options", "nosniff")
		http.ServeFileFS(w, r, static, name)
	})
	return mux
}

type handler struct {
	opts  Options
	slots chan struct{}
}

func (h *handler) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	sel, err := h.parse(r.URL.Query())
	if err != nil {
		h.message(w, http.StatusBadRequest, "Bad address: "+err.Error(), true, 0)
		return
	}
	select {
	case h.slots <- struct{}{}:
		defer func() { <-h.slots }()
	case <-r.Context().Done():
		return
	}
	if h.opts.Open == nil {
		h.message(w, http.StatusInternalServerError, "The dashboard has no data source (Options.Open is not set).", true, 0)
		return
	}
	q, err := h.opts.Open()
	if errors.Is(err, query.ErrNoData) {
		h.message(w, http.StatusServiceUnavailable, "No events have been committed yet. This page reloads every "+
			strconv.Itoa(RefreshSeconds)+" seconds and shows the charts once data arrives.", false, RefreshSeconds)
		return
	}
	if err != nil {
		h.message(w, http.StatusInternalServerError, "Could not open the data: "+err.Error(), true, RefreshSeconds)
		return
	}
	a := Fetch(q, sel, h.opts.Models)
	a.Truth = h.opts.Truth
	q.Close()
	body, err := Render(Build(a, sel, h.opts.Models, h.opts.Title))
	if err != nil {
		h.message(w, http.StatusInternalServerError, err.Error(), true, RefreshSeconds)
		return
	}
	h.headers(w)
	w.Write(body)
}

// Fetch asks the querier every question the page needs. Each chart's error
// is kept with its answer, so one failing query leaves the others drawn.
func Fetch(q *query.Querier, sel Selection, models []string) Answers {
	span := query.Span{Last: sel.Last}
	a := Answers{Latest: q.Latest()}
	var ans query.Answer
	if ans, a.ShiftErr = q.Answer(query.Request{Kind: query.KindShift, Model: sel.Model, Days: sel.Days}); a.ShiftErr == nil {
		a.Shift = *ans.Shift
	}
	for _, m := range models {
		c := ModelCredit{Model: m}
		if ans, c.Err = q.Answer(query.Request{Kind: query.KindCredit, Model: m, Window: span}); c.Err == nil {
			c.Answer = *ans.Credit
		}
		a.Credit = append(a.Credit, c)
	}
	if ans, a.ChannelsErr = q.Answer(query.Request{Kind: query.KindTransitions, Level: query.LevelChannel, Window: span}); a.ChannelsErr == nil {
		a.Channels = *ans.Transitions
	}
	if ans, a.FlowErr = q.Answer(query.Request{Kind: query.KindTransitions, Level: query.LevelAction, Window: span}); a.FlowErr == nil {
		a.Actions = *ans.Transitions
		if ans, a.FlowErr = q.Answer(query.Request{Kind: query.KindPaths, Level: query.LevelAction, Top: MainPaths, Window: span}); a.FlowErr == nil {
			a.Paths = *ans.Paths
		}
	}
	if ans, a.FunnelErr = q.Answer(query.Request{Kind: query.KindFunnel, Window: span}); a.FunnelErr == nil {
		a.Funnel = *ans.Funnel
	}
	if ans, a.AlertsErr = q.Answer(query.Request{Kind: query.KindAlerts, Points: true, Window: span}); a.AlertsErr == nil {
		a.Alerts = *ans.Alerts
	}
	return a
}

// parse reads the page's parameters. Each may appear once; others are
// refused, so a misspelt name never silently falls back to a default.
func (h *handler) parse(v url.Values) (Selection, error) {
	sel := Selection{Model: h.opts.Models[0], Last: query.DefaultLast, Days: DefaultDays}
	names := make([]string, 0, len(v))
	for name := range v {
		names = append(names, name)
	}
	sort.Strings(names)
	for _, name := range names {
		if name != "model" && name != "last" && name != "days" {
			return sel, fmt.Errorf("unknown parameter %q (takes model, last, days)", name)
		}
		if len(v[name]) > 1 {
			return sel, fmt.Errorf("parameter %q given %d times", name, len(v[name]))
		}
	}
	// The values are read as every surface reads them (query.ParseRequest:
	// the daily chart is a shift question, the other charts' window a
	// "last"); the page adds its own narrower bounds.
	shift := map[string]string{"model": sel.Model}
	for _, name := range []string{"model", "days"} {
		if v.Has(name) {
			shift[name] = v.Get(name)
		}
	}
	if v.Has("model") && !slices.Contains(h.opts.Models, v.Get("model")) {
		return sel, fmt.Errorf("model %q is not shown here (choose one of %s)", v.Get("model"), strings.Join(h.opts.Models, ", "))
	}
	r, err := query.ParseRequest(query.KindShift, shift)
	if err != nil {
		return sel, err
	}
	sel.Model = r.Model
	if r.Days != 0 {
		if r.Days > MaxDays {
			return sel, fmt.Errorf("days: must be 1 to %d on this page, got %d", MaxDays, r.Days)
		}
		sel.Days = r.Days
	}
	if v.Has("last") {
		r, err := query.ParseRequest(query.KindFunnel, map[string]string{"last": v.Get("last")})
		if err != nil {
			return sel, err
		}
		if d := r.Window.Last; d < time.Minute || d > MaxLast {
			return sel, fmt.Errorf("last: must be between 1m and %s on this page, got %s", durationLabel(MaxLast), v.Get("last"))
		}
		sel.Last = r.Window.Last
	}
	return sel, nil
}

func (h *handler) headers(w http.ResponseWriter) {
	w.Header().Set("Content-Type", "text/html; charset=utf-8")
	w.Header().Set("Content-Security-Policy", contentSecurityPolicy)
	w.Header().Set("X-Content-Type-Options", "nosniff")
	w.Header().Set("Referrer-Policy", "no-referrer")
	w.Header().Set("Cache-Control", "no-store")
}

// message answers with a short page (no data yet, a bad address, an error).
func (h *handler) message(w http.ResponseWriter, status int, text string, isErr bool, refresh int) {
	var b bytes.Buffer
	err := pageTemplate.ExecuteTemplate(&b, "message", struct {
		Title, Text, CSS string
		Error            bool
		Refresh          int
	}{h.opts.Title, text, cssPath, isErr, refresh})
	if err != nil { // the template is fixed and parsed at start; this does not happen
		w.Header().Set("Content-Type", "text/plain; charset=utf-8")
		w.Header().Set("X-Content-Type-Options", "nosniff")
		w.WriteHeader(status)
		fmt.Fprintln(w, text)
		return
	}
	h.headers(w)
	w.WriteHeader(status)
	w.Write(b.Bytes())
}
