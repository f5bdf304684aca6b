package remote

import (
	"encoding/binary"
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"

	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/state"
	"github.com/touchledger/touchledger/internal/tally"
)

// Service identity: every worker registers the same NATS micro service.
const (
	ServiceName = "touchledger"
	// Version is the version of this request/reply protocol (semantic
	// versioning; a change of the major number breaks old clients).
	Version = "1.1.0"
	// DefaultPrefix is the default subject prefix.
	DefaultPrefix = "tl"
	// DefaultPartitions is the default number of partitions.
	DefaultPartitions = 16
)

// Error codes of the service (micro error headers Nats-Service-Error-Code).
const (
	CodeBadRequest = "400" // the request does not decode or names an unknown family or resolution
	CodeTooLarge   = "413" // the reply would exceed the server's max_payload
	CodeNoData     = "503" // ask: the worker has committed no events yet
	CodeInternal   = "500" // the store could not be read
)

// sameMajor reports whether two protocol versions share their major number.
func sameMajor(a, b string) bool {
	ma, _, _ := strings.Cut(a, ".")
	mb, _, _ := strings.Cut(b, ".")
	return ma != "" && ma == mb
}

// Header names on replies.
const (
	// HeaderPartitions names the answering worker's range, "first-last".
	HeaderPartitions = "Tl-Partitions"
)

// LatestSubject is the discovery subject every worker answers (no queue
// group): prefix + ".svc.latest".
func LatestSubject(prefix string) string { return prefix + ".svc.latest" }

// RangeToken is a partition range as a subject token: "0-7".
func RangeToken(first, last int) string { return strconv.Itoa(first) + "-" + strconv.Itoa(last) }

// SumSubject is the subject of the sum endpoint of the workers owning
// partitions first..last: prefix + ".svc.<first>-<last>.sum". Workers
// owning the same range share a queue group, so one of them answers.
func SumSubject(prefix string, first, last int) string {
	return prefix + ".svc." + RangeToken(first, last) + ".sum"
}

// BucketsSubject is the subject of the buckets endpoint:
// prefix + ".svc.<first>-<last>.buckets".
func BucketsSubject(prefix string, first, last int) string {
	return prefix + ".svc." + RangeToken(first, last) + ".buckets"
}

// checkPrefix accepts a subject prefix of one or more plain tokens.
func checkPrefix(prefix string) error {
	if prefix == "" {
		return errors.New("remote: the subject prefix is empty")
	}
	for _, tok := range strings.Split(prefix, ".") {
		if tok == "" || strings.ContainsAny(tok, "*> \t\r\n") {
			return fmt.Errorf("remote: subject prefix %q: tokens must be non-empty without wildcards or spaces", prefix)
		}
	}
	return nil
}

// Resolution is a bucket size as it travels in a latest reply.
type Resolution struct {
	Name             string `json:"name"`
	StepSeconds      int64  `json:"step_seconds"`
	RetentionSeconds int64  `json:"retention_seconds"` // 0: kept forever
}

func wireResolutions(rs []state.Resolution) []Resolution {
	out := make([]Resolution, len(rs))
	for i, r := range rs {
		out[i] = Resolution{Name: r.Name, StepSeconds: int64(r.Step / time.Second), RetentionSeconds: int64(r.Retention / time.Second)}
	}
	return out
}

func formatResolutions(rs []Resolution) string {
	parts := make([]string, len(rs))
	for i, r := range rs {
		parts[i] = fmt.Sprintf("%s=%ds/%ds", r.Name, r.StepSeconds, r.RetentionSeconds)
	}
	return strings.Join(parts, ",")
}

// LatestReply is the JSON reply of the latest endpoint.
type LatestReply struct {
	Version     string       `json:"version"` // protocol version (Version)
	ID          string       `json:"id"`      // micro service instance id
	First       int          `json:"first"`   // partitions owned: first..last
	Last        int          `json:"last"`
	HasData     bool         `json:"has_data"` // false: nothing committed yet
	LatestNanos int64        `json:"latest_unix_nano,omitempty"`
	Latest      string       `json:"latest,omitempty"` // the same, RFC 3339
	Resolutions []Resolution `json:"resolutions"`
	// Params is the query-relevant part of the worker's effective
	// configuration (goal and funnel steps, alert settings, model limits):
	// query --nats answers with it unless given a configuration file.
	// Absent from workers older than protocol 1.1.
	Params *query.Params `json:"params,omitempty"`
}

// AskSubject is the subject of the ask endpoint of the workers owning
// partitions first..last: prefix + ".svc.<first>-<last>.ask".
func AskSubject(prefix string, first, last int) string {
	return prefix + ".svc." + RangeToken(first, last) + ".ask"
}

// AskRequest is the JSON request of the ask endpoint: a question's kind
// and its parameters as text, exactly as the query command's flags (without
// "--") or the HTTP API's parameters take them, e.g.
// {"kind": "credit", "params": {"model": "linear", "last": "7d"}}.
type AskRequest struct {
	Kind   string            `json:"kind"`
	Params map[string]string `json:"params,omitempty"`
}

// Piece is one run of buckets in a sum request.
type Piece struct {
	Res  int   `json:"res"`  // index into the worker's resolutions
	From int64 `json:"from"` // bucket starts in [from, to), Unix seconds
	To   int64 `json:"to"`
}

// SumRequest is the JSON request of the sum endpoint.
type SumRequest struct {
	Family tally.Family `json:"family"` // tally family number
	Pieces []Piece      `json:"pieces"`
}

// BucketsRequest is the JSON request of the buckets endpoint.
type BucketsRequest struct {
	Res    int          `json:"res"`
	Family tally.Family `json:"family"`
	From   int64        `json:"from"`
	To     int64        `json:"to"`
}

// maxPieces bounds a sum request (a plan has a handful of pieces).
const maxPieces = 4096

func knownFamily(f tally.Family) bool {
	for _, g := range tally.Families {
		if g == f {
			return true
		}
	}
	return false
}

func (r SumRequest) check(nres int) error {
	if !knownFamily(r.Family) {
		return fmt.Errorf("unknown family %d", r.Family)
	}
	if len(r.Pieces) > maxPieces {
		return fmt.Errorf("%d pieces, at most %d", len(r.Pieces), maxPieces)
	}
	for _, p := range r.Pieces {
		if p.Res < 0 || p.Res >= nres {
			return fmt.Errorf("resolution %d out of range (%d kept)", p.Res, nres)
		}
		if p.From > p.To {
			return fmt.Errorf("piece from %d after to %d", p.From, p.To)
		}
	}
	return nil
}

func (r BucketsRequest) check(nres int) error {
	if !knownFamily(r.Family) {
		return fmt.Errorf("unknown family %d", r.Family)
	}
	if r.Res < 0 || r.Res >= nres {
		return fmt.Errorf("resolution %d out of range (%d kept)", r.Res, nres)
	}
	if r.From > r.To {
		return fmt.Errorf("from %d after to %d", r.From, r.To)
	}
	return nil
}

// AppendBuckets appends the binary body of a buckets reply:
//
//	uvarint n | n × (varint bucket start, Unix s | uvarint len | table)
//
// where table is tally.AppendTable's encoding. Buckets are in time order.
func AppendBuckets(dst []byte, starts []int64, tables map[int64]tally.Table) []byte {
	dst = binary.AppendUvarint(dst, uint64(len(starts)))
	var tb []byte
	for _, b := range starts {
		tb = tally.AppendTable(tb[:0], tables[b])
		dst = binary.AppendVarint(dst, b)
		dst = binary.AppendUvarint(dst, uint64(len(tb)))
		dst = append(dst, tb...)
	}
	return dst
}

// DecodeBuckets adds the tables of a buckets reply body into out, per
// bucket start.
func DecodeBuckets(b []byte, out map[int64]tally.Table) error {
	n, k := binary.Uvarint(b)
	if k <= 0 || n > uint64(len(b)) {
		return fmt.Errorf("remote: buckets reply: %w", tally.ErrCorrupt)
	}
	b = b[k:]
	for i := uint64(0); i < n; i++ {
		start, k := binary.Varint(b)
		if k <= 0 {
			return fmt.Errorf("remote: buckets reply: %w", tally.ErrCorrupt)
		}
		b = b[k:]
		l, k := binary.Uvarint(b)
		if k <= 0 || l > uint64(len(b)-k) {
			return fmt.Errorf("remote: buckets reply: %w", tally.ErrCorrupt)
		}
		t := out[start]
		if t == nil {
			t = tally.Table{}
			out[start] = t
		}
		if err := tally.DecodeTable(b[k:k+int(l)], t); err != nil {
			return fmt.Errorf("remote: buckets reply, bucket %d: %w", start, err)
		}
		b = b[k+int(l):]
	}
	if len(b) != 0 {
		return fmt.Errorf("remote: buckets reply: %w: %d trailing bytes", tally.ErrCorrupt, len(b))
	}
	return nil
}
