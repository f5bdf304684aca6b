package testsupport

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"hash/fnv"
	"math"
	"reflect"
	"testing"
	"time"

	"github.com/cespare/xxhash/v2"
	"github.com/nats-io/nats-server/v2/server"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/state"
)

// NATSOptions tune StartNATS.
type NATSOptions struct {
	MaxPayload int32 // 0: the server default
	// Partitions, when > 0, adds the live subject layout's mapping
	// tl.in.<kind>.<user key> → tl.ev.<partition>.<kind>.<user key>.
	Partitions int
}

// StartNATS runs an embedded NATS server (no JetStream) on 127.0.0.1 and a
// random port, shut down when the test ends.
func StartNATS(t testing.TB, o NATSOptions) *server.Server {
	t.Helper()
	s, err := server.NewServer(&server.Options{Host: "127.0.0.1", Port: -1, NoLog: true, NoSigs: true, MaxPayload: o.MaxPayload})
	if err != nil {
		t.Fatal(err)
	}
	if o.Partitions > 0 {
		dst := fmt.Sprintf("tl.ev.{{partition(%d,2)}}.{{wildcard(1)}}.{{wildcard(2)}}", o.Partitions)
		if err := s.GlobalAccount().AddMapping("tl.in.*.*", dst); err != nil {
			t.Fatal(err)
		}
	}
	go s.Start()
	if !s.ReadyForConnections(5 * time.Second) {
		t.Fatal("nats server did not start")
	}
	t.Cleanup(func() { s.Shutdown(); s.WaitForShutdown() })
	return s
}

// DemoEvents is the small fixed-seed demo world most tests replay: 2000
// visitors over 7 days, the credit shift on day 3, the outage on day 5
// (invented data).
func DemoEvents(t testing.TB) []byte {
	t.Helper()
	c := shop.DefaultConfig()
	c.Visitors, c.Days, c.ShiftDay, c.IncidentDay = 2000, 7, 3, 5
	var buf bytes.Buffer
	if _, err := shop.Generate(&buf, c); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

// Replay replays events into the data directory dir with cfg and leaves
// the store open (closed when the test ends).
func Replay(t testing.TB, dir string, cfg config.Config, events []byte) *state.Store {
	t.Helper()
	ctx := context.Background()
	st, err := state.Open(ctx, pipeline.StoreOptions(dir, cfg))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { st.Close() })
	p, err := pipeline.New(st, pipeline.FromConfig(cfg), nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := pipeline.Replay(ctx, p, "demo", bytes.NewReader(events), cfg.Limits.MaxPayload); err != nil {
		t.Fatal(err)
	}
	if err := p.Close(); err != nil {
		t.Fatal(err)
	}
	return st
}

// ReplayDir replays events into a new data directory with cfg, closes it
// and returns its path (for commands that open it themselves).
func ReplayDir(t testing.TB, cfg config.Config, events []byte) string {
	t.Helper()
	dir := t.TempDir()
	if err := Replay(t, dir, cfg, events).Close(); err != nil {
		t.Fatal(err)
	}
	return dir
}

// UserKey is the subject-safe user key of the live layout: lowercase hex of
// xxhash64(user), 16 characters.
func UserKey(user string) string { return fmt.Sprintf("%016x", xxhash.Sum64String(user)) }

// PartitionOf is what nats-server's partition(n, token) computes for a
// user's key: FNV-1a (32 bit) of the token, modulo n (nats-server
// server/subject_transform.go, getHashPartition; the remote package's tests
// check it against a running server).
func PartitionOf(user string, n int) int {
	h := fnv.New32a()
	h.Write([]byte(UserKey(user)))
	return int(h.Sum32() % uint32(n))
}

// SplitByPartition keeps the event lines whose user falls in partitions
// first..last of n.
func SplitByPartition(t testing.TB, events []byte, n, first, last int) []byte {
	t.Helper()
	var out bytes.Buffer
	sc := bufio.NewScanner(bytes.NewReader(events))
	sc.Buffer(nil, 1<<20)
	for sc.Scan() {
		var e struct {
			User string `json:"user"`
		}
		if err := json.Unmarshal(sc.Bytes(), &e); err != nil {
			t.Fatal(err)
		}
		if p := PartitionOf(e.User, n); p >= first && p <= last {
			out.Write(sc.Bytes())
			out.WriteByte('\n')
		}
	}
	if err := sc.Err(); err != nil {
		t.Fatal(err)
	}
	return out.Bytes()
}

// CloseJSON compares two JSON texts: equal, numbers within 1e-9 relative
// (models add floats in map order, so answers agree to the last bits only
// in integer inputs).
func CloseJSON(a, b string) bool {
	var x, y any
	if json.Unmarshal([]byte(a), &x) != nil || json.Unmarshal([]byte(b), &y) != nil {
		return false
	}
	return CloseEnough(x, y)
}

// CloseEnough compares decoded JSON values as CloseJSON does.
func CloseEnough(x, y any) bool {
	switch xv := x.(type) {
	case float64:
		yv, ok := y.(float64)
		return ok && math.Abs(xv-yv) <= 1e-9*math.Max(1, math.Max(math.Abs(xv), math.Abs(yv)))
	case []any:
		yv, ok := y.([]any)
		if !ok || len(xv) != len(yv) {
			return false
		}
		for i := range xv {
			if !CloseEnough(xv[i], yv[i]) {
				return false
			}
		}
		return true
	case map[string]any:
		yv, ok := y.(map[string]any)
		if !ok || len(xv) != len(yv) {
			return false
		}
		for k := range xv {
			if !CloseEnough(xv[k], yv[k]) {
				return false
			}
		}
		return true
	}
	return reflect.DeepEqual(x, y)
}
