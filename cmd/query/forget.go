package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"slices"
	"time"

	"github.com/nats-io/nats.go"

	"github.com/touchledger/touchledger/internal/query"
)

// forgetTimeout is how long query forget --nats waits for the workers
// unless --timeout is given: an erasure commits and purges before it
// answers.
const forgetTimeout = 10 * time.Second

// forgetReply is the part of a worker's erasure reply (internal/stream
// ForgetReply, JSON) this command reads.
type forgetReply struct {
	User         string    `json:"user"`
	HadState     bool      `json:"had_state"`
	Buffered     int       `json:"buffered"`
	DroppedUntil time.Time `json:"dropped_until"`
	Partitions   string    `json:"partitions"`
	Partition    int       `json:"partition"`
	Owner        bool      `json:"owner"`
	Purged       uint64    `json:"purged"`
	PurgeFilter  string    `json:"purge_filter"`
	Error        string    `json:"error"`
}

// forgetAnswer is the JSON answer of query forget --nats: every worker's
// reply as it sent it, and the partitions no worker answered for.
type forgetAnswer struct {
	Replies           []json.RawMessage `json:"replies"`
	MissingPartitions []int             `json:"missing_partitions,omitempty"`
}

// forgetLive sends the erasure request to every worker (<prefix>.admin.forget,
// no queue group) and collects replies until every partition is covered or
// the timeout passes. It exits 1 when a partition did not answer or a
// worker reported an error: the erasure is then incomplete (sending it
// again is safe).
func forgetLive(nc *nats.Conn, prefix string, partitions int, timeout time.Duration, user string, f query.Format,
	stdout, stderr io.Writer, fail func(int, error) int) int {
	body, err := json.Marshal(map[string]string{"user": user})
	if err != nil {
		return fail(1, err)
	}
	inbox := nc.NewInbox()
	sub, err := nc.SubscribeSync(inbox)
	if err != nil {
		return fail(1, err)
	}
	defer sub.Unsubscribe()
	subject := prefix + ".admin.forget"
	if err := nc.PublishRequest(subject, inbox, body); err != nil {
		return fail(1, fmt.Errorf("%s: %w", subject, err))
	}
	if err := nc.Flush(); err != nil {
		return fail(1, fmt.Errorf("%s: %w", subject, err))
	}
	covered := make([]bool, partitions)
	left := partitions
	var raws []json.RawMessage
	var replies []forgetReply
	failed := false
	deadline := time.Now().Add(timeout)
	for left > 0 {
		wait := time.Until(deadline)
		if wait <= 0 {
			break
		}
		m, err := sub.NextMsg(wait)
		if errors.Is(err, nats.ErrTimeout) {
			break
		}
		if err != nil {
			return fail(1, fmt.Errorf("%s: %w", subject, err))
		}
		var r forgetReply
		if err := json.Unmarshal(m.Data, &r); err != nil {
			return fail(1, fmt.Errorf("%s: a reply does not decode: %w", subject, err))
		}
		var first, last int
		if _, err := fmt.Sscanf(r.Partitions, "%d-%d", &first, &last); err != nil || first < 0 || last < first || last >= partitions {
			return fail(1, fmt.Errorf("%s: a worker answers for partitions %q, not inside 0-%d: set the same --partitions as the workers", subject, r.Partitions, partitions-1))
		}
		for p := first; p <= last; p++ {
			if !covered[p] {
				covered[p] = true
				left--
			}
		}
		if r.Error != "" {
			failed = true
		}
		raws = append(raws, json.RawMessage(slices.Clone(m.Data)))
		replies = append(replies, r)
	}
	var missing []int
	for p, c := range covered {
		if !c {
			missing = append(missing, p)
		}
	}
	if len(replies) == 0 {
		return fail(1, fmt.Errorf("no worker answered on %s within %v", subject, timeout))
	}
	if f == query.JSON {
		if err := query.WriteJSON(stdout, forgetAnswer{Replies: raws, MissingPartitions: missing}); err != nil {
			return fail(1, err)
		}
	} else {
		for _, r := range replies {
			fmt.Fprintln(stdout, describeForget(r))
		}
	}
	if len(missing) > 0 {
		fmt.Fprintf(stderr, "query forget: %s: the erasure is incomplete, send it again when they run\n", query.PartialWarning(missing))
	}
	if failed || len(missing) > 0 {
		return 1
	}
	return 0
}

// describeForget says in one line what a worker did.
func describeForget(r forgetReply) string {
	head := "partitions " + r.Partitions + ": "
	if r.User == "" {
		return head + "failed: " + r.Error
	}
	what := "had no stored state"
	if r.HadState {
		what = "session, journey and de-duplication state deleted"
	}
	if r.Buffered > 0 {
		what += fmt.Sprintf(", %d buffered events dropped", r.Buffered)
	}
	s := fmt.Sprintf("%sforgot %s: %s; events for them arriving before %s are dropped", head, r.User, what, r.DroppedUntil.Format(time.RFC3339))
	if r.Owner {
		s += fmt.Sprintf("; their partition %d is here: %d messages purged from the stream (%s)", r.Partition, r.Purged, r.PurgeFilter)
	}
	if r.Error != "" {
		s += "; but: " + r.Error
	}
	return s
}
