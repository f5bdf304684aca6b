package remote

import (
	"encoding/json"
	"errors"
	"fmt"
	"slices"
	"time"

	"github.com/nats-io/nats.go"

	"github.com/touchledger/touchledger/internal/stream"
)

// ForgetResult is every worker's answer to one erasure request.
type ForgetResult struct {
	Replies []stream.ForgetReply
	Raw     []json.RawMessage // each reply as the worker sent it
	// Missing lists the partitions no worker answered for: the erasure is
	// incomplete there (sending it again is safe).
	Missing []int
}

// Failed reports whether a worker answered with an error.
func (r ForgetResult) Failed() bool {
	return slices.ContainsFunc(r.Replies, func(x stream.ForgetReply) bool { return x.Error != "" })
}

// Forget sends an erasure request for user to every worker
// (stream.ForgetSubject, no queue group) and collects replies until every
// partition 0..partitions−1 is covered or timeout passes. No reply at all is
// an error; partitions left uncovered are listed in Missing.
func Forget(nc *nats.Conn, prefix string, partitions int, timeout time.Duration, user string) (ForgetResult, error) {
	var res ForgetResult
	body, err := json.Marshal(stream.ForgetRequest{User: user})
	if err != nil {
		return res, err
	}
	inbox := nc.NewInbox()
	sub, err := nc.SubscribeSync(inbox)
	if err != nil {
		return res, err
	}
	defer sub.Unsubscribe()
	subject := stream.ForgetSubject(prefix)
	if err := nc.PublishRequest(subject, inbox, body); err != nil {
		return res, fmt.Errorf("%s: %w", subject, err)
	}
	if err := nc.Flush(); err != nil {
		return res, fmt.Errorf("%s: %w", subject, err)
	}
	covered := make([]bool, partitions)
	left := partitions
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
			return res, fmt.Errorf("%s: %w", subject, err)
		}
		var r stream.ForgetReply
		if err := json.Unmarshal(m.Data, &r); err != nil {
			return res, fmt.Errorf("%s: a reply does not decode: %w", subject, err)
		}
		var first, last int
		if _, err := fmt.Sscanf(r.Partitions, "%d-%d", &first, &last); err != nil || first < 0 || last < first || last >= partitions {
			return res, fmt.Errorf("%s: a worker answers for partitions %q, not inside 0-%d: set the same partition count as the workers", subject, r.Partitions, partitions-1)
		}
		for p := first; p <= last; p++ {
			if !covered[p] {
				covered[p] = true
				left--
			}
		}
		res.Raw = append(res.Raw, json.RawMessage(slices.Clone(m.Data)))
		res.Replies = append(res.Replies, r)
	}
	for p, c := range covered {
		if !c {
			res.Missing = append(res.Missing, p)
		}
	}
	if len(res.Replies) == 0 {
		return res, fmt.Errorf("no worker answered on %s within %v", subject, timeout)
	}
	return res, nil
}
