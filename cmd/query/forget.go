package main

import (
	"encoding/json"
	"fmt"
	"io"
	"time"

	"github.com/nats-io/nats.go"

	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/remote"
	"github.com/touchledger/touchledger/internal/stream"
)

// forgetTimeout is how long query forget --nats waits for the workers
// unless --timeout is given: an erasure commits and purges before it
// answers.
const forgetTimeout = 10 * time.Second

// forgetAnswer is the JSON answer of query forget --nats: every worker's
// reply as it sent it, and the partitions no worker answered for.
type forgetAnswer struct {
	Replies           []json.RawMessage `json:"replies"`
	MissingPartitions []int             `json:"missing_partitions,omitempty"`
}

// forgetLive asks every worker to erase user (remote.Forget) and shows
// their replies. It exits 1 when a partition did not answer or a worker
// reported an error: the erasure is then incomplete (sending it again is
// safe).
func forgetLive(nc *nats.Conn, prefix string, partitions int, timeout time.Duration, user string, f query.Format,
	stdout, stderr io.Writer, fail func(int, error) int) int {
	res, err := remote.Forget(nc, prefix, partitions, timeout, user)
	if err != nil {
		return fail(1, err)
	}
	if f == query.JSON {
		if err := query.WriteJSON(stdout, forgetAnswer{Replies: res.Raw, MissingPartitions: res.Missing}); err != nil {
			return fail(1, err)
		}
	} else {
		for _, r := range res.Replies {
			fmt.Fprintln(stdout, describeForget(r))
		}
	}
	if len(res.Missing) > 0 {
		fmt.Fprintf(stderr, "query forget: %s: the erasure is incomplete, send it again when they run\n", query.PartialWarning(res.Missing))
	}
	if res.Failed() || len(res.Missing) > 0 {
		return 1
	}
	return 0
}

// describeForget says in one line what a worker did.
func describeForget(r stream.ForgetReply) string {
	head := "partitions " + r.Partitions + ": "
	if r.ForgetReport == nil {
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
		if r.PurgedDead > 0 {
			s += fmt.Sprintf(", %d dead letters erased", r.PurgedDead)
		}
	}
	if r.Error != "" {
		s += "; but: " + r.Error
	}
	return s
}
