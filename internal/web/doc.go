// Package web serves a worker over HTTP: health, readiness, Prometheus
// metrics, and the query answers as JSON or CSV for other tools.
//
// Inputs: Options (a prometheus.Gatherer, a func opening a query.Querier on
// a snapshot of the committed counters, a readiness func, an optional bearer
// token). Output: an http.Handler, and NewServer wraps it in an http.Server
// with timeouts and request size limits.
//
// Endpoints (GET; HEAD answers the same headers):
//
//	/healthz       200 "ok" while the process runs (never needs the token)
//	/readyz        200 once Options.Ready returns nil, else 503 with the reason
//	/metrics       the Gatherer in the Prometheus text format
//	/api/credit       model (required), by=channel|campaign, order, window
//	/api/shift        model (required), days (1–3660, default 14), order
//	/api/transitions  level=channel|action (required), order, window
//	/api/paths        level=channel|action (required), top (default 10), window
//	/api/funnel       window
//	/api/alerts       points=1, window
//	/api/status       window
//
// window is last=7d (a duration ending at the latest event) or from=T&to=T
// (RFC 3339 times or dates, to exclusive); none means the last 30 days.
// order is the Markov order, 1 to markov_max_order (default 1; the markov
// model and channel transitions only). The parameters of each endpoint are
// query.Kind.Params: the handler turns them into a query.Request with
// query.ParseRequest, asks query.Querier.Answer and writes it with
// query.Render — the parser, entry point and renderer the query command
// uses — so an answer's JSON is byte for byte what `query <command> --format
// json` prints for the same data, its CSV what `--format csv` prints, and a
// refusal's message what `query` prints.
//
// Format: ?format=json|csv wins; otherwise the Accept header's preference
// between application/json and text/csv; otherwise JSON.
//
// Errors are JSON {"error": "..."}: 400 for a bad, unknown, inapplicable or
// repeated parameter (a query.ParamError, message naming the parameter; an
// unknown name never falls back to a default), 503 when nothing has been
// ingested yet
// (query.ErrNoData), 500 otherwise (logged).
//
// Access: DefaultAddr is loopback. CheckListen refuses a non-loopback
// address unless a token is configured; with Options.Token every endpoint
// but /healthz requires "Authorization: Bearer <token>" (401 otherwise;
// compared in constant time). The answers are aggregates over people's
// behaviour: keep them on the machine or behind the token.
package web
