package remote

import (
	"encoding/json"
	"errors"
	"fmt"
	"slices"
	"strings"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/micro"

	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/state"
	"github.com/touchledger/touchledger/internal/tally"
)

// worker answers requests from one store.
type worker struct {
	nc          *nats.Conn
	first, last int
	st          *state.Store
	res         []state.Resolution
	params      query.Params
	id          string
	rangeHeader micro.Headers
}

// Register starts the "touchledger" micro service on nc for a worker that
// owns partitions first..last and keeps its counters in st at resolutions
// res, answering with the query-time settings params (its effective
// configuration, which the latest endpoint announces). Endpoints (see
// docs/remote.md):
//
//	<prefix>.svc.latest                  every worker answers (no queue group)
//	<prefix>.svc.<first>-<last>.sum      queue group: one worker of the range answers
//	<prefix>.svc.<first>-<last>.buckets
//	<prefix>.svc.<first>-<last>.ask      a question (AskRequest) answered from the range's own data
//
// Each request reads its own snapshot of st, so one answer is consistent.
// Stop the service before closing st.
func Register(nc *nats.Conn, prefix string, first, last int, st *state.Store, res []state.Resolution, params query.Params) (micro.Service, error) {
	if nc == nil || st == nil {
		return nil, errors.New("remote: register needs a connection and a store")
	}
	if err := checkPrefix(prefix); err != nil {
		return nil, err
	}
	if first < 0 || last < first {
		return nil, fmt.Errorf("remote: bad partition range %d-%d", first, last)
	}
	if len(res) == 0 {
		return nil, errors.New("remote: no resolutions")
	}
	rng := RangeToken(first, last)
	w := &worker{nc: nc, first: first, last: last, st: st, res: slices.Clone(res), params: params,
		rangeHeader: micro.Headers{HeaderPartitions: {rng}}}
	svc, err := micro.AddService(nc, micro.Config{
		Name:        ServiceName,
		Version:     Version,
		Description: "touchledger worker: additive counter tables of partitions " + rng,
		Metadata:    map[string]string{"prefix": prefix, "partitions": rng},
	})
	if err != nil {
		return nil, fmt.Errorf("remote: add service: %w", err)
	}
	w.id = svc.Info().ID
	g := svc.AddGroup(prefix + ".svc")
	meta := map[string]string{"partitions": rng}
	err = errors.Join(
		g.AddEndpoint("latest", micro.HandlerFunc(w.latest), micro.WithEndpointQueueGroupDisabled(), micro.WithEndpointMetadata(meta)),
		g.AddEndpoint("sum", micro.HandlerFunc(w.sum), micro.WithEndpointSubject(rng+".sum"), micro.WithEndpointMetadata(meta)),
		g.AddEndpoint("buckets", micro.HandlerFunc(w.buckets), micro.WithEndpointSubject(rng+".buckets"), micro.WithEndpointMetadata(meta)),
		g.AddEndpoint("ask", micro.HandlerFunc(w.ask), micro.WithEndpointSubject(rng+".ask"), micro.WithEndpointMetadata(meta)),
	)
	if err != nil {
		_ = svc.Stop()
		return nil, fmt.Errorf("remote: add endpoints: %w", err)
	}
	return svc, nil
}

// fail sends a micro error; descriptions travel in a header, so they are
// kept to one line.
func (w *worker) fail(req micro.Request, code string, err error) {
	desc := strings.NewReplacer("\r", " ", "\n", " ").Replace(err.Error())
	_ = req.Error(code, desc, nil, micro.WithHeaders(w.rangeHeader))
}

// guard turns a panic while reading the store (for instance a store closed
// under a running service) into an internal error reply.
func (w *worker) guard(req micro.Request) {
	if r := recover(); r != nil {
		w.fail(req, CodeInternal, fmt.Errorf("reading the store failed: %v", r))
	}
}

// respond sends body, or a 413 error when it exceeds the server's limit.
func (w *worker) respond(req micro.Request, body []byte) {
	if limit := w.nc.MaxPayload(); limit > 0 && int64(len(body)) > limit {
		w.fail(req, CodeTooLarge, fmt.Errorf("the reply of %d bytes exceeds the server's max_payload of %d bytes: raise max_payload or ask for a shorter window", len(body), limit))
		return
	}
	_ = req.Respond(body, micro.WithHeaders(w.rangeHeader))
}

func (w *worker) latest(req micro.Request) {
	defer w.guard(req)
	src := query.NewLocalSource(w.st)
	defer src.Close()
	t, ok, err := src.Latest()
	if err != nil {
		w.fail(req, CodeInternal, err)
		return
	}
	r := LatestReply{Version: Version, ID: w.id, First: w.first, Last: w.last, HasData: ok, Resolutions: wireResolutions(w.res), Params: &w.params}
	if ok {
		r.LatestNanos = t.UnixNano()
		r.Latest = t.UTC().Format(time.RFC3339Nano)
	}
	body, err := json.Marshal(r)
	if err != nil {
		w.fail(req, CodeInternal, err)
		return
	}
	w.respond(req, body)
}

func (w *worker) sum(req micro.Request) {
	defer w.guard(req)
	var r SumRequest
	if err := json.Unmarshal(req.Data(), &r); err != nil {
		w.fail(req, CodeBadRequest, fmt.Errorf("sum request: %w", err))
		return
	}
	if err := r.check(len(w.res)); err != nil {
		w.fail(req, CodeBadRequest, fmt.Errorf("sum request: %w", err))
		return
	}
	p := query.Plan{Pieces: make([]query.Piece, len(r.Pieces))}
	for i, pc := range r.Pieces {
		p.Pieces[i] = query.Piece{Res: pc.Res, From: pc.From, To: pc.To}
	}
	src := query.NewLocalSource(w.st)
	defer src.Close()
	t, err := src.Sum(p, r.Family)
	if err != nil {
		w.fail(req, CodeInternal, err)
		return
	}
	w.respond(req, tally.AppendTable(nil, t))
}

func (w *worker) buckets(req micro.Request) {
	defer w.guard(req)
	var r BucketsRequest
	if err := json.Unmarshal(req.Data(), &r); err != nil {
		w.fail(req, CodeBadRequest, fmt.Errorf("buckets request: %w", err))
		return
	}
	if err := r.check(len(w.res)); err != nil {
		w.fail(req, CodeBadRequest, fmt.Errorf("buckets request: %w", err))
		return
	}
	src := query.NewLocalSource(w.st)
	defer src.Close()
	m, err := src.Buckets(r.Res, r.Family, r.From, r.To)
	if err != nil {
		w.fail(req, CodeInternal, err)
		return
	}
	starts := make([]int64, 0, len(m))
	for b := range m {
		starts = append(starts, b)
	}
	slices.Sort(starts)
	w.respond(req, AppendBuckets(nil, starts, m))
}

// ask answers one question from this worker's store: the request's
// parameters go through query.ParseRequest, as on every surface, so a
// question is refused here exactly when the CLI or HTTP refuse it, with the
// same message (error code 400). The reply is the answer's JSON.
func (w *worker) ask(req micro.Request) {
	defer w.guard(req)
	var r AskRequest
	if err := json.Unmarshal(req.Data(), &r); err != nil {
		w.fail(req, CodeBadRequest, fmt.Errorf("ask request: %w", err))
		return
	}
	qr, err := query.ParseRequest(query.Kind(r.Kind), r.Params)
	if err != nil {
		w.fail(req, CodeBadRequest, err)
		return
	}
	if qr.Kind == query.KindScorecard {
		w.fail(req, CodeBadRequest, errors.New("kind: scorecard reads a local truth file: ask it with the query command"))
		return
	}
	q, err := query.NewQuerierFrom(query.NewLocalSource(w.st), w.res, w.params)
	if errors.Is(err, query.ErrNoData) {
		w.fail(req, CodeNoData, err)
		return
	}
	if err != nil {
		w.fail(req, CodeInternal, err)
		return
	}
	defer q.Close()
	a, err := q.Answer(qr)
	switch {
	case query.IsParamError(err):
		w.fail(req, CodeBadRequest, err)
		return
	case err != nil:
		w.fail(req, CodeInternal, err)
		return
	}
	body, err := json.Marshal(a)
	if err != nil {
		w.fail(req, CodeInternal, err)
		return
	}
	w.respond(req, body)
}
