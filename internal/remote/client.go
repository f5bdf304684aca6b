package remote

import (
	"encoding/json"
	"errors"
	"fmt"
	"reflect"
	"slices"
	"strings"
	"sync"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/micro"

	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/state"
	"github.com/touchledger/touchledger/internal/tally"
)

// DefaultTimeout is the default discovery window and per-request timeout.
const DefaultTimeout = 2 * time.Second

// Options configure a Source.
type Options struct {
	Prefix     string        // subject prefix; "" means DefaultPrefix
	Partitions int           // partitions in all (0..Partitions−1); 0 means DefaultPartitions
	Timeout    time.Duration // discovery window and per-request timeout; 0 means DefaultTimeout
	// Resolutions, when set, are the buckets the querier plans with: every
	// worker must keep exactly these (a plan names resolutions by index).
	Resolutions []state.Resolution
}

// Worker is a partition range that answered discovery.
type Worker struct {
	First, Last int
	IDs         []string  // micro service instance ids that answered for the range
	HasData     bool      // some instance has committed events
	Latest      time.Time // largest event time over the range's instances
	// Params is the configuration the range announced (nil: a worker
	// older than protocol 1.1).
	Params *query.Params
}

// Source is a query.Source that asks every worker over NATS and adds their
// tables. Sum and Buckets may be called concurrently; Close may not race
// with them.
type Source struct {
	nc      *nats.Conn
	o       Options
	workers []Worker
	missing []int
	latest  time.Time
	hasData bool
	closed  bool
	res     []Resolution // the workers' resolutions (all equal)
}

// ErrNoWorkers is returned when no worker answered discovery.
var ErrNoWorkers = errors.New("no touchledger worker answered")

// ErrClosed is returned by a closed Source.
var ErrClosed = errors.New("remote: source is closed")

// WorkerError is an error reply from, or a failed request to, the workers of
// one partition range.
type WorkerError struct {
	First, Last int
	Endpoint    string // latest, sum or buckets
	Code        string // micro error code; empty when the request itself failed
	Err         error
}

func (e *WorkerError) Error() string {
	if e.Code != "" {
		return fmt.Sprintf("the worker of partitions %d-%d refused the %s request (error %s): %v", e.First, e.Last, e.Endpoint, e.Code, e.Err)
	}
	return fmt.Sprintf("the worker of partitions %d-%d did not answer the %s request: %v", e.First, e.Last, e.Endpoint, e.Err)
}

func (e *WorkerError) Unwrap() error { return e.Err }

// serviceError returns the micro error carried by a reply, or nil.
func serviceError(m *nats.Msg) (code string, err error) {
	if m.Header == nil {
		return "", nil
	}
	code = m.Header.Get(micro.ErrorCodeHeader)
	if code == "" {
		return "", nil
	}
	return code, errors.New(m.Header.Get(micro.ErrorHeader))
}

// NewSource discovers the workers: it sends one request to
// <prefix>.svc.latest, which every worker answers, and collects replies
// until every partition is covered or the timeout passes. Partitions that no
// worker claimed are listed by Missing. The caller keeps ownership of nc.
func NewSource(nc *nats.Conn, o Options) (*Source, error) {
	if nc == nil {
		return nil, errors.New("remote: no NATS connection")
	}
	if o.Prefix == "" {
		o.Prefix = DefaultPrefix
	}
	if err := checkPrefix(o.Prefix); err != nil {
		return nil, err
	}
	if o.Partitions == 0 {
		o.Partitions = DefaultPartitions
	}
	if o.Partitions < 1 {
		return nil, fmt.Errorf("remote: %d partitions: need at least one", o.Partitions)
	}
	if o.Timeout == 0 {
		o.Timeout = DefaultTimeout
	}
	if o.Timeout < 0 {
		return nil, fmt.Errorf("remote: negative timeout %v", o.Timeout)
	}
	s := &Source{nc: nc, o: o}
	if err := s.discover(); err != nil {
		return nil, err
	}
	return s, nil
}

func (s *Source) discover() error {
	subject := LatestSubject(s.o.Prefix)
	inbox := s.nc.NewInbox()
	sub, err := s.nc.SubscribeSync(inbox)
	if err != nil {
		return fmt.Errorf("remote: discovery: %w", err)
	}
	defer func() { _ = sub.Unsubscribe() }()
	if err := s.nc.PublishRequest(subject, inbox, nil); err != nil {
		return fmt.Errorf("remote: discovery on %s: %w", subject, err)
	}
	var want []Resolution
	if s.o.Resolutions != nil {
		want = wireResolutions(s.o.Resolutions)
	}
	var firstRange string
	n := s.o.Partitions
	owner := make([]int, n) // index+1 into s.workers; 0: not covered
	left := n
	deadline := time.Now().Add(s.o.Timeout)
	for left > 0 {
		wait := time.Until(deadline)
		if wait <= 0 {
			break
		}
		m, err := sub.NextMsg(wait)
		if errors.Is(err, nats.ErrTimeout) || errors.Is(err, nats.ErrNoResponders) {
			break // no responders: nobody listens on the subject
		}
		if err != nil {
			return fmt.Errorf("remote: discovery on %s: %w", subject, err)
		}
		var r LatestReply
		if code, rerr := serviceError(m); rerr != nil {
			first, last := -1, -1
			fmt.Sscanf(m.Header.Get(HeaderPartitions), "%d-%d", &first, &last)
			return &WorkerError{First: first, Last: last, Endpoint: "latest", Code: code, Err: rerr}
		}
		if err := json.Unmarshal(m.Data, &r); err != nil {
			return fmt.Errorf("remote: discovery on %s: a reply does not decode: %w", subject, err)
		}
		if !sameMajor(r.Version, Version) {
			return fmt.Errorf("remote: the worker of partitions %d-%d speaks protocol %q, this query %q: upgrade one of them", r.First, r.Last, r.Version, Version)
		}
		if r.First < 0 || r.Last < r.First || r.Last >= n {
			return fmt.Errorf("remote: a worker claims partitions %d-%d, but there are %d partitions (0-%d): set the same partition count everywhere", r.First, r.Last, n, n-1)
		}
		if want != nil && !slices.Equal(want, r.Resolutions) {
			if s.o.Resolutions == nil {
				return fmt.Errorf("remote: workers keep different buckets: partitions %s keep %s, partitions %d-%d keep %s: give every worker the same store resolutions", firstRange, formatResolutions(want), r.First, r.Last, formatResolutions(r.Resolutions))
			}
			return fmt.Errorf("remote: the worker of partitions %d-%d keeps buckets %s, this query plans with %s: use the workers' configuration file", r.First, r.Last, formatResolutions(r.Resolutions), formatResolutions(want))
		}
		if want == nil {
			want, firstRange = r.Resolutions, RangeToken(r.First, r.Last)
		}
		idx := -1
		for i, w := range s.workers {
			switch {
			case w.First == r.First && w.Last == r.Last:
				idx = i
			case r.First <= w.Last && w.First <= r.Last:
				return fmt.Errorf("remote: workers claim overlapping partitions %d-%d and %d-%d: every partition needs exactly one owner range", w.First, w.Last, r.First, r.Last)
			}
		}
		if idx < 0 {
			s.workers = append(s.workers, Worker{First: r.First, Last: r.Last})
			idx = len(s.workers) - 1
			for p := r.First; p <= r.Last; p++ {
				owner[p] = idx + 1
				left--
			}
		}
		w := &s.workers[idx]
		w.IDs = append(w.IDs, r.ID)
		if w.Params == nil {
			w.Params = r.Params
		}
		if r.HasData {
			t := time.Unix(0, r.LatestNanos).UTC()
			if !w.HasData || t.After(w.Latest) {
				w.Latest = t
			}
			w.HasData = true
			if !s.hasData || t.After(s.latest) {
				s.latest = t
			}
			s.hasData = true
		}
	}
	if len(s.workers) == 0 {
		return fmt.Errorf("%w on %s within %v", ErrNoWorkers, subject, s.o.Timeout)
	}
	s.res = want
	slices.SortFunc(s.workers, func(a, b Worker) int { return a.First - b.First })
	for p, o := range owner {
		if o == 0 {
			s.missing = append(s.missing, p)
		}
	}
	return nil
}

// ErrNoConfig is returned by Config when no worker announced its
// configuration (workers older than protocol 1.1).
var ErrNoConfig = errors.New("the workers did not announce their configuration (protocol before 1.1): give the configuration file")

// Resolutions returns the bucket sizes every worker keeps.
func (s *Source) Resolutions() []state.Resolution {
	out := make([]state.Resolution, len(s.res))
	for i, r := range s.res {
		out[i] = state.Resolution{Name: r.Name, Step: time.Duration(r.StepSeconds) * time.Second, Retention: time.Duration(r.RetentionSeconds) * time.Second}
	}
	return out
}

// Config returns the query-time settings the workers announced. Workers
// whose settings differ are an error naming the ranges and the settings
// that differ: their tables would be read with one configuration, which is
// wrong for some of them.
func (s *Source) Config() (query.Params, error) {
	var ref *Worker
	var diffs []string
	for i := range s.workers {
		w := &s.workers[i]
		if w.Params == nil {
			continue
		}
		if ref == nil {
			ref = w
			continue
		}
		if d := paramsDiff(*ref.Params, *w.Params); d != "" {
			diffs = append(diffs, fmt.Sprintf("partitions %s and %s differ in %s", RangeToken(ref.First, ref.Last), RangeToken(w.First, w.Last), d))
		}
	}
	switch {
	case ref == nil:
		return query.Params{}, ErrNoConfig
	case diffs != nil:
		return query.Params{}, fmt.Errorf("remote: the workers run with different configurations: %s", strings.Join(diffs, "; "))
	}
	return *ref.Params, nil
}

// paramsDiff names the JSON fields in which a and b differ, "" if none.
func paramsDiff(a, b query.Params) string {
	var ma, mb map[string]any
	ja, _ := json.Marshal(a)
	jb, _ := json.Marshal(b)
	_ = json.Unmarshal(ja, &ma)
	_ = json.Unmarshal(jb, &mb)
	var names []string
	for k, v := range ma {
		if !reflect.DeepEqual(v, mb[k]) {
			names = append(names, k)
		}
	}
	slices.Sort(names)
	return strings.Join(names, ", ")
}

// Missing lists the partitions no worker answered for (nil when complete).
func (s *Source) Missing() []int { return slices.Clone(s.missing) }

// Workers lists the partition ranges that answered, in partition order.
func (s *Source) Workers() []Worker {
	out := slices.Clone(s.workers)
	for i := range out {
		out[i].IDs = slices.Clone(out[i].IDs)
	}
	return out
}

// Latest implements query.Source: the largest event time over all workers.
func (s *Source) Latest() (time.Time, bool, error) {
	if s.closed {
		return time.Time{}, false, ErrClosed
	}
	return s.latest, s.hasData, nil
}

// Sum implements query.Source: every worker sums its buckets, and the
// tables are added.
func (s *Source) Sum(p query.Plan, f tally.Family) (tally.Table, error) {
	req := SumRequest{Family: f, Pieces: make([]Piece, len(p.Pieces))}
	for i, pc := range p.Pieces {
		req.Pieces[i] = Piece{Res: pc.Res, From: pc.From, To: pc.To}
	}
	bodies, err := s.ask("sum", SumSubject, req)
	if err != nil {
		return nil, err
	}
	out := tally.Table{}
	for i, b := range bodies {
		if err := tally.DecodeTable(b, out); err != nil {
			w := s.workers[i]
			return nil, &WorkerError{First: w.First, Last: w.Last, Endpoint: "sum", Err: fmt.Errorf("reply does not decode: %w", err)}
		}
	}
	return out, nil
}

// Buckets implements query.Source: every worker's buckets, added per bucket.
func (s *Source) Buckets(res int, f tally.Family, from, to int64) (map[int64]tally.Table, error) {
	bodies, err := s.ask("buckets", BucketsSubject, BucketsRequest{Res: res, Family: f, From: from, To: to})
	if err != nil {
		return nil, err
	}
	out := map[int64]tally.Table{}
	for i, b := range bodies {
		if err := DecodeBuckets(b, out); err != nil {
			w := s.workers[i]
			return nil, &WorkerError{First: w.First, Last: w.Last, Endpoint: "buckets", Err: err}
		}
	}
	return out, nil
}

// ask sends req to every worker range at once and returns the reply bodies
// in worker order. Any failure fails the whole answer: tables from only some
// of the discovered workers would be neither complete nor marked partial.
func (s *Source) ask(endpoint string, subject func(prefix string, first, last int) string, req any) ([][]byte, error) {
	if s.closed {
		return nil, ErrClosed
	}
	body, err := json.Marshal(req)
	if err != nil {
		return nil, fmt.Errorf("remote: %s request: %w", endpoint, err)
	}
	bodies := make([][]byte, len(s.workers))
	errs := make([]error, len(s.workers))
	var wg sync.WaitGroup
	for i, w := range s.workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			m, err := s.nc.Request(subject(s.o.Prefix, w.First, w.Last), body, s.o.Timeout)
			if err != nil {
				errs[i] = &WorkerError{First: w.First, Last: w.Last, Endpoint: endpoint, Err: err}
				return
			}
			if code, rerr := serviceError(m); rerr != nil {
				errs[i] = &WorkerError{First: w.First, Last: w.Last, Endpoint: endpoint, Code: code, Err: rerr}
				return
			}
			bodies[i] = m.Data
		}()
	}
	wg.Wait()
	if err := errors.Join(errs...); err != nil {
		return nil, err
	}
	return bodies, nil
}

// Close implements query.Source. It does not close the NATS connection.
func (s *Source) Close() { s.closed = true }
