package web

import (
	"bytes"
	"context"
	"crypto/subtle"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"strings"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promhttp"

	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/query"
)

// Options configure the handler.
type Options struct {
	// Gatherer is served on /metrics (typically the registry the metrics
	// were registered with). Nil: /metrics answers 404.
	Gatherer prometheus.Gatherer
	// OpenQuerier opens a snapshot for one API request; the handler closes
	// it. query.ErrNoData makes the API answer 503. Nil: /api answers 404.
	OpenQuerier func() (*query.Querier, error)
	// Ready reports readiness for /readyz: nil error = ready. Nil: always
	// ready. See ReadyAfterCommit.
	Ready func(ctx context.Context) error
	// Token, when set, is required as "Authorization: Bearer <token>" on
	// every endpoint except /healthz.
	Token string
	// MaxInFlight bounds concurrent API answers (each holds a snapshot and
	// may run a data-driven model); further requests wait. Default 4.
	MaxInFlight int
	// Log receives server-side errors. Default: discarded.
	Log *slog.Logger
	// Page, if set, serves "/" and "/static/" (the dashboard).
	Page http.Handler
	// Backup, if set, serves GET /admin/backup: a point-in-time copy of the
	// worker's store (state.Store.Backup) streamed as application/octet-stream.
	// It always needs a token, also on loopback: Token, or BackupToken
	// when Token is empty; with neither it answers 403.
	Backup func(w io.Writer) (int, error)
	// BackupToken is the bearer token of /admin/backup when Token is empty
	// (cmd/ingest generates one into the data directory).
	BackupToken string
}

// NewHandler serves /healthz, /readyz, /metrics and the JSON/CSV API under
// /api/ (see the package documentation).
func NewHandler(opts Options) http.Handler {
	if opts.MaxInFlight <= 0 {
		opts.MaxInFlight = 4
	}
	if opts.Log == nil {
		opts.Log = slog.New(slog.DiscardHandler)
	}
	mux := http.NewServeMux()
	mux.HandleFunc("GET /healthz", func(w http.ResponseWriter, r *http.Request) {
		w.Header().Set("Content-Type", "text/plain; charset=utf-8")
		io.WriteString(w, "ok\n")
	})
	mux.HandleFunc("GET /readyz", func(w http.ResponseWriter, r *http.Request) {
		w.Header().Set("Content-Type", "text/plain; charset=utf-8")
		if opts.Ready != nil {
			if err := opts.Ready(r.Context()); err != nil {
				w.WriteHeader(http.StatusServiceUnavailable)
				fmt.Fprintf(w, "not ready: %v\n", err)
				return
			}
		}
		io.WriteString(w, "ready\n")
	})
	if opts.Gatherer != nil {
		mux.Handle("GET /metrics", promhttp.HandlerFor(opts.Gatherer, promhttp.HandlerOpts{
			ErrorLog:      promLogger{opts.Log},
			ErrorHandling: promhttp.ContinueOnError,
		}))
	}
	if opts.OpenQuerier != nil {
		a := &api{opts: opts, slots: make(chan struct{}, opts.MaxInFlight)}
		for _, k := range APIKinds {
			mux.Handle("GET /api/"+string(k), a.handle(k))
		}
		mux.HandleFunc("GET /api/", func(w http.ResponseWriter, r *http.Request) {
			writeError(w, http.StatusNotFound, fmt.Errorf("no such endpoint %s (see /api/credit, shift, transitions, paths, funnel, alerts, status)", r.URL.Path))
		})
	}
	if opts.Backup != nil {
		var guard func(http.Handler) http.Handler
		switch {
		case opts.Token != "":
			guard = func(h http.Handler) http.Handler { return h } // the whole mux asks for it
		case opts.BackupToken != "":
			guard = func(h http.Handler) http.Handler { return requireToken(opts.BackupToken, h) }
		default:
			guard = func(http.Handler) http.Handler {
				return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
					writeError(w, http.StatusForbidden, errors.New("backups need a token: start the worker with --http-token (or let it generate one)"))
				})
			}
		}
		mux.Handle("GET /admin/backup", guard(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
			// A large store takes longer than the server's write timeout.
			_ = http.NewResponseController(w).SetWriteDeadline(time.Time{})
			w.Header().Set("Content-Type", "application/octet-stream")
			w.Header().Set("Content-Disposition", `attachment; filename="touchledger.backup"`)
			if _, err := opts.Backup(w); err != nil {
				// Headers are gone; the client sees a truncated body, which
				// restore rejects (checksum).
				opts.Log.Error("backup", "error", err)
			}
		})))
	}
	if opts.Page != nil {
		mux.Handle("GET /{$}", opts.Page)
		mux.Handle("GET /static/", opts.Page)
	}
	if opts.Token == "" {
		return mux
	}
	return requireToken(opts.Token, mux)
}

// requireToken lets /healthz through and asks every other request for the
// token (compared in constant time): as "Authorization: Bearer <token>", or,
// for browsers opening the dashboard, as the password of HTTP Basic
// authentication (any user name), which browsers prompt for.
func requireToken(token string, next http.Handler) http.Handler {
	want := []byte(token)
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if r.URL.Path == "/healthz" {
			next.ServeHTTP(w, r)
			return
		}
		scheme, got, ok := strings.Cut(r.Header.Get("Authorization"), " ")
		good := ok && strings.EqualFold(scheme, "Bearer") && subtle.ConstantTimeCompare([]byte(strings.TrimSpace(got)), want) == 1
		if _, pass, basic := r.BasicAuth(); !good && basic {
			good = subtle.ConstantTimeCompare([]byte(pass), want) == 1
		}
		if !good {
			w.Header().Set("WWW-Authenticate", `Bearer realm="touchledger"`)
			w.Header().Add("WWW-Authenticate", `Basic realm="touchledger"`)
			writeError(w, http.StatusUnauthorized, errors.New("a valid bearer token is required"))
			return
		}
		next.ServeHTTP(w, r)
	})
}

// promLogger passes promhttp's errors to slog.
type promLogger struct{ log *slog.Logger }

func (p promLogger) Println(v ...any) { p.log.Error("metrics", "error", fmt.Sprint(v...)) }

// APIKinds are the questions served under /api/ (every kind but the
// scorecard, which reads a truth file named by the asker).
var APIKinds = []query.Kind{query.KindCredit, query.KindShift, query.KindTransitions, query.KindPaths,
	query.KindFunnel, query.KindAlerts, query.KindStatus}

// writeError answers {"error": "..."} with the status.
func writeError(w http.ResponseWriter, status int, err error) {
	w.Header().Set("Content-Type", contentJSON)
	w.Header().Set("X-Content-Type-Options", "nosniff")
	w.WriteHeader(status)
	json.NewEncoder(w).Encode(struct {
		Error string `json:"error"`
	}{err.Error()})
}

type api struct {
	opts  Options
	slots chan struct{}
}

// handle answers one kind: the URL's parameters (format aside) become a
// query.Request through query.ParseRequest, the parser every surface uses,
// so a request is refused here exactly when `query` refuses it, with the
// same message. Parameter errors answer 400, no data 503, anything else 500.
func (a *api) handle(k query.Kind) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		f, err := responseFormat(r)
		if err != nil {
			writeError(w, http.StatusBadRequest, err)
			return
		}
		req, err := requestOf(k, r.URL.Query())
		if err != nil {
			writeError(w, http.StatusBadRequest, err)
			return
		}
		select {
		case a.slots <- struct{}{}:
			defer func() { <-a.slots }()
		case <-r.Context().Done():
			writeError(w, http.StatusServiceUnavailable, fmt.Errorf("request abandoned while waiting: %w", r.Context().Err()))
			return
		}
		var buf bytes.Buffer
		if err := a.answer(req, &buf, f); err != nil {
			status := http.StatusInternalServerError
			switch {
			case errors.Is(err, query.ErrNoData):
				status = http.StatusServiceUnavailable
			case query.IsParamError(err):
				status = http.StatusBadRequest
			default:
				a.opts.Log.Error("api answer", "path", r.URL.Path, "query", r.URL.RawQuery, "error", err)
			}
			writeError(w, status, err)
			return
		}
		ct := contentJSON
		if f == query.CSV {
			ct = contentCSV
		}
		w.Header().Set("Content-Type", ct)
		w.Header().Set("Vary", "Accept")
		w.Header().Set("X-Content-Type-Options", "nosniff")
		w.Write(buf.Bytes())
	})
}

func (a *api) answer(req query.Request, w io.Writer, f query.Format) error {
	q, err := a.opts.OpenQuerier()
	if err != nil {
		return fmt.Errorf("open data: %w", err)
	}
	defer q.Close()
	ans, err := q.Answer(req)
	if err != nil {
		return err
	}
	return query.Render(w, ans, f, query.RenderOptions{})
}

// StatusSource reports a processor's committed progress
// (*pipeline.Processor implements it).
type StatusSource interface {
	Status() pipeline.Status
}

// ErrNotCommitted is the readiness error before the first commit.
var ErrNotCommitted = errors.New("the worker has input but has not committed yet")

// ReadyAfterCommit is a readiness func for Options.Ready: ready once the
// processor has committed at least once in this process, or while idle
// reports that there is no input to process yet (nil idle: never idle).
func ReadyAfterCommit(s StatusSource, idle func(ctx context.Context) bool) func(ctx context.Context) error {
	return func(ctx context.Context) error {
		if s.Status().Commits > 0 {
			return nil
		}
		if idle != nil && idle(ctx) {
			return nil
		}
		return ErrNotCommitted
	}
}
