package stream

import (
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"

	"github.com/cespare/xxhash/v2"

	"github.com/touchledger/touchledger/internal/event"
)

// Kinds of input subjects: the event contract's two kinds.
const (
	KindTouch  = "touch"
	KindAction = "action"
)

// Config names the stream layout and tunes the consumer. DefaultConfig
// holds the documented defaults; flags and files set it at the edge.
type Config struct {
	// SubjectUser, if set, maps a raw user id to what subject user keys are
	// computed from (the pseudonym when a key is configured; see
	// SendOptions.SubjectUser). Erasure uses it to find a person's messages.
	SubjectUser func(user string) string `json:"-"`
	// Prefix is the first token of every subject (default "tl"):
	// <prefix>.in.<kind>.<ukey> (publishers), <prefix>.ev.<partition>.<kind>.<ukey>
	// (the stream), <prefix>.dead.<reason> (dead letters).
	Prefix string
	// Stream holds the partitioned events (default "TL_EVENTS").
	Stream string
	// DeadStream holds the dead letters (default "TL_DEAD").
	DeadStream string
	// Partitions is the number of partitions the server's subject mapping
	// splits users into (default 16). It must equal the mapping's.
	Partitions int
	// Replicas of both streams (default 1; 3 on a three-node cluster).
	Replicas int
	// MaxAge is how long the streams keep messages (default 30 days): a
	// worker's data directory can be rebuilt from the stream within it.
	MaxAge time.Duration
	// Duplicates is the events stream's de-duplication window for
	// Nats-Msg-Id (default 2 minutes). Duplicates older than the window
	// reach the worker, whose per-user de-duplication counts them.
	Duplicates time.Duration
	// DeadDuplicates is the dead-letter stream's window (default 10
	// minutes): a dead letter published again after a restart within it is
	// stored once.
	DeadDuplicates time.Duration

	// FetchBatch is the most messages one pull request asks for (default 1000).
	FetchBatch int
	// FetchWait is how long a pull request waits for messages (default 500 ms).
	FetchWait time.Duration
	// InFlight bounds the messages fetched but not yet offered to the
	// processor, besides the pull request being filled (default 4096).
	InFlight int
	// MaxAckPending is the consumer's limit of delivered, unacknowledged
	// messages (default 1<<20); messages are acknowledged after each commit.
	MaxAckPending int
	// AckWait is how long the server waits for an acknowledgement before
	// delivering a message again (default 2 minutes). Redelivered messages
	// are skipped by position, so it only has to exceed the commit interval
	// comfortably.
	AckWait time.Duration
	// TickInterval is how often the worker lets event time follow the wall
	// clock and commits on time (default 200 ms).
	TickInterval time.Duration
	// QuietAfter is how long the input must bring no message before event
	// time follows the wall clock (default 1 s): the clock handed to
	// Processor.Tick lags the wall clock by it, so messages still on their
	// way through the bus (a pull request being filled, a chunk waiting for
	// the processing goroutine) are not overtaken by it and made late.
	QuietAfter time.Duration
	// WatchdogTimeout: when no message arrives for this long while the
	// consumer reports pending messages, the worker flags itself stalled,
	// logs it and repositions its consumer (default 30 s).
	WatchdogTimeout time.Duration
	// Clock is the wall clock handed to Processor.Tick; nil means time.Now.
	// Tests set it to let event time pass without waiting.
	Clock func() time.Time
}

// DefaultConfig returns the documented defaults.
func DefaultConfig() Config {
	return Config{
		Prefix:          "tl",
		Stream:          "TL_EVENTS",
		DeadStream:      "TL_DEAD",
		Partitions:      16,
		Replicas:        1,
		MaxAge:          30 * 24 * time.Hour,
		Duplicates:      2 * time.Minute,
		DeadDuplicates:  10 * time.Minute,
		FetchBatch:      1000,
		FetchWait:       500 * time.Millisecond,
		InFlight:        4096,
		MaxAckPending:   1 << 20,
		AckWait:         2 * time.Minute,
		TickInterval:    200 * time.Millisecond,
		QuietAfter:      time.Second,
		WatchdogTimeout: 30 * time.Second,
	}
}

// maxPartitions bounds the partition count: each partition is one filter
// subject of a consumer.
const maxPartitions = 1024

// Validate checks the configuration.
func (c Config) Validate() error {
	if err := checkToken("prefix", c.Prefix); err != nil {
		return err
	}
	if err := checkStreamName("stream", c.Stream); err != nil {
		return err
	}
	if err := checkStreamName("dead-letter stream", c.DeadStream); err != nil {
		return err
	}
	switch {
	case c.Stream == c.DeadStream:
		return errors.New("stream: events and dead-letter streams must differ")
	case c.Partitions < 1 || c.Partitions > maxPartitions:
		return fmt.Errorf("stream: partitions %d not in [1, %d]", c.Partitions, maxPartitions)
	case c.Replicas < 1 || c.Replicas > 5:
		return fmt.Errorf("stream: replicas %d not in [1, 5]", c.Replicas)
	case c.MaxAge <= 0:
		return errors.New("stream: max age must be positive")
	case c.Duplicates <= 0 || c.Duplicates > c.MaxAge:
		return errors.New("stream: duplicates window must be positive and at most the max age")
	case c.DeadDuplicates <= 0 || c.DeadDuplicates > c.MaxAge:
		return errors.New("stream: dead-letter duplicates window must be positive and at most the max age")
	case c.FetchBatch < 1:
		return errors.New("stream: fetch batch must be positive")
	case c.FetchWait < 10*time.Millisecond:
		return errors.New("stream: fetch wait must be at least 10ms")
	case c.InFlight < 1:
		return errors.New("stream: in-flight bound must be positive")
	case c.MaxAckPending < c.FetchBatch:
		return errors.New("stream: max ack pending must be at least the fetch batch")
	case c.AckWait <= 0:
		return errors.New("stream: ack wait must be positive")
	case c.TickInterval <= 0:
		return errors.New("stream: tick interval must be positive")
	case c.QuietAfter < 0:
		return errors.New("stream: quiet-after must not be negative")
	case c.WatchdogTimeout < c.FetchWait:
		return errors.New("stream: watchdog timeout must be at least the fetch wait")
	}
	return nil
}

func checkToken(what, s string) error {
	if s == "" {
		return fmt.Errorf("stream: %s is empty", what)
	}
	if strings.ContainsAny(s, ".*> \t\r\n") {
		return fmt.Errorf("stream: %s %q must be one subject token (no '.', '*', '>' or spaces)", what, s)
	}
	return nil
}

func checkStreamName(what, s string) error {
	if s == "" {
		return fmt.Errorf("stream: %s name is empty", what)
	}
	if strings.ContainsAny(s, ".*>/\\ \t\r\n") {
		return fmt.Errorf("stream: %s name %q has a character streams cannot have", what, s)
	}
	return nil
}

// UserKey returns the subject-safe key of a user id: the 16 lowercase hex
// digits of its xxhash64.
func UserKey(user string) string {
	var b [16]byte
	return string(appendHex64(b[:0], xxhash.Sum64String(user)))
}

func appendHex64(b []byte, x uint64) []byte {
	const digits = "0123456789abcdef"
	for i := 60; i >= 0; i -= 4 {
		b = append(b, digits[(x>>uint(i))&0xf])
	}
	return b
}

// Subject returns the input subject a publisher sends a user's event of
// kind (KindTouch or KindAction) to: <prefix>.in.<kind>.<UserKey(user)>.
func Subject(prefix, kind, user string) string {
	return prefix + ".in." + kind + "." + UserKey(user)
}

// CheckSubject verifies that an events-stream subject
// <prefix>.ev.<partition>.<kind>.<user key> fits the event decoded from
// its payload: the kind is the event's, the user key is
// UserKey(SubjectUser(user)) (the pseudonym's key with pseudonymisation),
// and the partition is the one the mapping gives that key. Anything else
// was published around the mapping or with another user's key (one user's
// events would land in several partitions and an erasure would miss
// some): a bad_subject reject.
func (c Config) CheckSubject(subject string, e *event.Event) error {
	bad := func(format string, a ...any) error {
		return &event.RejectError{Reason: event.ReasonBadSubject, Msg: "subject " + subject + ": " + fmt.Sprintf(format, a...)}
	}
	rest, ok := strings.CutPrefix(subject, c.Prefix+".ev.")
	toks := strings.Split(rest, ".")
	if !ok || len(toks) != 3 {
		return bad("want %s.ev.<partition>.<kind>.<user key>", c.Prefix)
	}
	if toks[1] != e.Kind.String() {
		return bad("says %q, the event is a %s", toks[1], e.Kind)
	}
	u := e.User
	if c.SubjectUser != nil {
		u = c.SubjectUser(u)
	}
	key := UserKey(u)
	if toks[2] != key {
		return bad("user key %q is not the event's user's (%s)", toks[2], key)
	}
	if p := strconv.Itoa(partitionOfKey(key, c.Partitions)); toks[0] != p {
		return bad("partition %s, the user's is %s (published around the mapping?)", toks[0], p)
	}
	return nil
}

// InputSubjects returns the wildcard of every input subject, the source of
// the partition mapping.
func (c Config) InputSubjects() string { return c.Prefix + ".in.*.*" }

// PartitionMapping returns the mapping's destination: the user key token
// chooses the partition (JetStream deterministic subject-mapping
// partitioning), kind and key are kept.
func (c Config) PartitionMapping() string {
	return fmt.Sprintf("%s.ev.{{partition(%d,2)}}.{{wildcard(1)}}.{{wildcard(2)}}", c.Prefix, c.Partitions)
}

// EventSubjects returns the events stream's subject filter.
func (c Config) EventSubjects() string { return c.Prefix + ".ev.>" }

// DeadSubjects returns the dead-letter stream's subject filter.
func (c Config) DeadSubjects() string { return c.Prefix + ".dead.>" }

// DeadSubject returns the dead-letter subject of a reason.
func (c Config) DeadSubject(reason string) string { return c.Prefix + ".dead." + reason }

// PartitionSubject returns the subject filter of one partition.
func (c Config) PartitionSubject(p int) string {
	return c.Prefix + ".ev." + strconv.Itoa(p) + ".>"
}

// Partitions is an inclusive range of partition numbers a worker owns.
type Partitions struct{ First, Last int }

// AllPartitions returns every partition of c.
func (c Config) AllPartitions() Partitions { return Partitions{0, c.Partitions - 1} }

// ParsePartitions reads "3" or "0-7" for a stream of n partitions; "" means
// all of them.
func ParsePartitions(s string, n int) (Partitions, error) {
	if s == "" {
		return Partitions{0, n - 1}, nil
	}
	lo, hi, found := strings.Cut(s, "-")
	first, err := strconv.Atoi(strings.TrimSpace(lo))
	if err != nil {
		return Partitions{}, fmt.Errorf("partitions %q: want N or FIRST-LAST", s)
	}
	last := first
	if found {
		if last, err = strconv.Atoi(strings.TrimSpace(hi)); err != nil {
			return Partitions{}, fmt.Errorf("partitions %q: want N or FIRST-LAST", s)
		}
	}
	p := Partitions{first, last}
	return p, p.Check(n)
}

// Check reports whether the range lies inside n partitions.
func (p Partitions) Check(n int) error {
	switch {
	case p.Last < p.First:
		return fmt.Errorf("partitions %s: the first (%d) is after the last (%d); give FIRST-LAST with FIRST <= LAST", p, p.First, p.Last)
	case p.First < 0 || p.Last >= n:
		return fmt.Errorf("partitions %s not inside 0-%d", p, n-1)
	}
	return nil
}

// String formats the range as FIRST-LAST.
func (p Partitions) String() string { return strconv.Itoa(p.First) + "-" + strconv.Itoa(p.Last) }

// Filters returns the consumer filter subjects of the range.
func (c Config) Filters(p Partitions) []string {
	out := make([]string, 0, p.Last-p.First+1)
	for i := p.First; i <= p.Last; i++ {
		out = append(out, c.PartitionSubject(i))
	}
	return out
}

// ConsumerName returns the durable consumer of a partition range:
// tl-worker-<first>-<last>.
func ConsumerName(p Partitions) string { return "tl-worker-" + p.String() }

// SourceName returns the pipeline source of a worker: stream:<stream>:<first>-<last>.
// Its positions are stream sequences.
func (c Config) SourceName(p Partitions) string { return "stream:" + c.Stream + ":" + p.String() }
