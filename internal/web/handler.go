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

	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/credit"
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
	// MarkovMaxOrder is the configuration's markov_max_order, the largest
	// order parameter accepted. Default: the configuration default.
	MarkovMaxOrder int
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
	if opts.MarkovMaxOrder <= 0 {
		opts.MarkovMaxOrder = config.Default().MarkovMaxOrder
	}
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
		for name, e := range a.endpoints() {
			mux.Handle("GET /api/"+name, a.handle(e))
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

// writeError answers {"error": "..."} with the status.
func writeError(w http.ResponseWriter, status int, err error) {
	w.Header().Set("Content-Type", contentJSON)
	w.Header().Set("X-Content-Type-Options", "nosniff")
	w.WriteHeader(status)
	json.NewEncoder(w).Encode(struct {
		Error string `json:"error"`
	}{err.Error()})
}

// answer computes an answer from a querier and writes it in a format.
type answer func(q *query.Querier, w io.Writer, f query.Format) error

// endpoint is one API path: the parameters it takes and how it reads them
// into an answer (errors there are bad requests).
type endpoint struct {
	params []string
	parse  func(p *params) (answer, error)
}

type api struct {
	opts  Options
	slots chan struct{}
}

func (a *api) handle(e endpoint) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		f, err := responseFormat(r)
		if err != nil {
			writeError(w, http.StatusBadRequest, err)
			return
		}
		p, err := newParams(r.URL.Query(), e.params)
		if err != nil {
			writeError(w, http.StatusBadRequest, err)
			return
		}
		run, err := e.parse(p)
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
		if err := a.run(run, &buf, f); err != nil {
			status := http.StatusInternalServerError
			var bad badRequest
			switch {
			case errors.Is(err, query.ErrNoData):
				status = http.StatusServiceUnavailable
			case errors.Is(err, query.ErrEmptyWindow), errors.As(err, &bad):
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

func (a *api) run(fn answer, w io.Writer, f query.Format) error {
	q, err := a.opts.OpenQuerier()
	if err != nil {
		return fmt.Errorf("open data: %w", err)
	}
	defer q.Close()
	return fn(q, w, f)
}

// parseModel checks a model name (required).
func parseModel(p *params) (string, error) {
	m := p.str("model")
	if m == "" {
		return "", badf("model is required (%s)", strings.Join(modelNames(), ", "))
	}
	if !query.IsDataDriven(m) {
		if _, err := credit.ParseModel(m); err != nil {
			return "", badRequest{fmt.Errorf("model: %w", err)}
		}
	}
	return m, nil
}

func modelNames() []string {
	var names []string
	for _, m := range credit.RuleModels {
		names = append(names, m.String())
	}
	return append(names, query.ModelMarkov, query.ModelShapley)
}

func parseLevel(p *params) (string, error) {
	switch l := p.str("level"); l {
	case "channel", "action":
		return l, nil
	case "":
		return "", badf("level is required: channel or action")
	default:
		return "", badf("unknown level %q: use channel or action", l)
	}
}

// endpoints lists the API. Defaults follow `query`: by=channel, order=1,
// days=14, top=10, no window = the last 30 days.
func (a *api) endpoints() map[string]endpoint {
	maxOrder := a.opts.MarkovMaxOrder
	return map[string]endpoint{
		"credit": {
			params: append([]string{"model", "by", "order"}, windowParams...),
			parse: func(p *params) (answer, error) {
				model, err := parseModel(p)
				if err != nil {
					return nil, err
				}
				by, err := query.ParseBy(p.str("by"))
				if err != nil {
					return nil, badRequest{fmt.Errorf("by: %w", err)}
				}
				if query.IsDataDriven(model) && by != query.ByChannel {
					return nil, badf("the %s model credits channels only (no by=%s)", model, by)
				}
				order, err := p.intIn("order", 1, 1, maxOrder)
				if err != nil {
					return nil, err
				}
				span, err := p.span()
				if err != nil {
					return nil, err
				}
				return func(q *query.Querier, w io.Writer, f query.Format) error {
					ans, err := q.Credit(model, by, order, span)
					if err != nil {
						return err
					}
					return query.WriteCredit(w, ans, f, false)
				}, nil
			},
		},
		"shift": {
			params: []string{"model", "days", "order"},
			parse: func(p *params) (answer, error) {
				model, err := parseModel(p)
				if err != nil {
					return nil, err
				}
				days, err := p.intIn("days", 14, 1, 3660)
				if err != nil {
					return nil, err
				}
				order, err := p.intIn("order", 1, 1, maxOrder)
				if err != nil {
					return nil, err
				}
				return func(q *query.Querier, w io.Writer, f query.Format) error {
					ans, err := q.Shift(model, order, days)
					if err != nil {
						return err
					}
					return query.WriteShift(w, ans, f, false)
				}, nil
			},
		},
		"transitions": {
			params: append([]string{"level", "order"}, windowParams...),
			parse: func(p *params) (answer, error) {
				level, err := parseLevel(p)
				if err != nil {
					return nil, err
				}
				order, err := p.intIn("order", 1, 1, maxOrder)
				if err != nil {
					return nil, err
				}
				span, err := p.span()
				if err != nil {
					return nil, err
				}
				return func(q *query.Querier, w io.Writer, f query.Format) error {
					ans, err := q.Transitions(level, order, span)
					if err != nil {
						return err
					}
					return query.WriteTransitions(w, ans, f)
				}, nil
			},
		},
		"paths": {
			params: append([]string{"level", "top"}, windowParams...),
			parse: func(p *params) (answer, error) {
				level, err := parseLevel(p)
				if err != nil {
					return nil, err
				}
				top, err := p.intIn("top", 10, 1, 1_000_000)
				if err != nil {
					return nil, err
				}
				span, err := p.span()
				if err != nil {
					return nil, err
				}
				return func(q *query.Querier, w io.Writer, f query.Format) error {
					ans, err := q.Paths(level, top, span)
					if err != nil {
						return err
					}
					return query.WritePaths(w, ans, f)
				}, nil
			},
		},
		"funnel": {
			params: windowParams,
			parse: func(p *params) (answer, error) {
				span, err := p.span()
				if err != nil {
					return nil, err
				}
				return func(q *query.Querier, w io.Writer, f query.Format) error {
					ans, err := q.Funnel(span)
					if err != nil {
						return err
					}
					return query.WriteFunnel(w, ans, f)
				}, nil
			},
		},
		"alerts": {
			params: append([]string{"points"}, windowParams...),
			parse: func(p *params) (answer, error) {
				points, err := p.flag("points")
				if err != nil {
					return nil, err
				}
				span, err := p.span()
				if err != nil {
					return nil, err
				}
				return func(q *query.Querier, w io.Writer, f query.Format) error {
					ans, err := q.Alerts(span, points)
					if err != nil {
						return err
					}
					return query.WriteAlerts(w, ans, f)
				}, nil
			},
		},
		"status": {
			params: windowParams,
			parse: func(p *params) (answer, error) {
				span, err := p.span()
				if err != nil {
					return nil, err
				}
				return func(q *query.Querier, w io.Writer, f query.Format) error {
					s, plan, err := q.Status(span)
					if err != nil {
						return err
					}
					return query.WriteStatus(w, s, plan, f)
				}, nil
			},
		},
	}
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
