package stream

import (
	"context"
	"fmt"
	"strconv"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/pipeline"
)

// Dead-letter headers.
const (
	HeaderReason    = "Tl-Reason"     // the reject reason (event.Reason)
	HeaderSubject   = "Tl-Subject"    // the subject the event was consumed from
	HeaderStreamSeq = "Tl-Stream-Seq" // its sequence in the events stream
	HeaderError     = "Tl-Error"      // the decoder's message
)

// DeadLetters is the pipeline.RejectSink of live input: each rejected or
// late message is published to <prefix>.dead.<reason> (stream TL_DEAD) with
// the original payload, the headers above and the message id dead-<seq>, so
// a message rejected again after a restart is stored once (within the dead
// stream's de-duplication window).
//
// Reject publishes asynchronously; Sync waits until the stream has
// acknowledged every dead letter, so a commit (which calls Sync first) only
// covers dead letters the bus holds. Reset is a no-op: a dead letter
// published after the last commit is published again with the same id when
// its message is read again.
//
// Not safe for concurrent use: the worker's processing goroutine calls
// Reject and Sync. Each reject carries its message's origin (stream
// sequence and subject) for the dead letter's headers.
type DeadLetters struct {
	js      jetstream.JetStream
	cfg     Config
	timeout time.Duration

	pending   []deadPending
	published int64
}

// deadPending is a dead letter published and not yet acknowledged.
type deadPending struct {
	f   jetstream.PubAckFuture
	msg *nats.Msg
	id  string
}

// maxDeadPending bounds the unacknowledged dead letters: Reject waits for
// them beyond it.
const maxDeadPending = 1024

// NewDeadLetters returns a sink publishing with js under cfg's prefix.
func NewDeadLetters(js jetstream.JetStream, cfg Config) *DeadLetters {
	return &DeadLetters{js: js, cfg: cfg, timeout: 10 * time.Second}
}

// Published returns the number of dead letters acknowledged so far by this
// sink (a restart repeats those after the last commit; the stream stores
// them once).
func (d *DeadLetters) Published() int64 { return d.published }

// Reset does nothing: see the type's comment.
func (d *DeadLetters) Reset(int64) error { return nil }

// Reject publishes one dead letter.
func (d *DeadLetters) Reject(o pipeline.Origin, reason event.Reason, msg string, payload []byte) error {
	pos, subject := o.Pos, o.Subject
	m := &nats.Msg{Subject: d.cfg.DeadSubject(string(reason)), Data: append([]byte(nil), payload...), Header: nats.Header{}}
	m.Header.Set(HeaderReason, string(reason))
	m.Header.Set(HeaderSubject, subject)
	m.Header.Set(HeaderStreamSeq, strconv.FormatUint(pos, 10))
	m.Header.Set(HeaderError, headerSafe(msg))
	id := "dead-" + strconv.FormatUint(pos, 10)
	if len(d.pending) >= maxDeadPending {
		if _, err := d.Sync(); err != nil {
			return err
		}
	}
	f, err := d.js.PublishMsgAsync(m, jetstream.WithMsgID(id))
	if err != nil {
		return d.publishSync(m, id, err)
	}
	d.pending = append(d.pending, deadPending{f: f, msg: m, id: id})
	return nil
}

// Sync waits for the acknowledgement of every dead letter published since
// the last Sync, publishing again (same id) any that failed, and returns the
// count published so far as the mark.
func (d *DeadLetters) Sync() (int64, error) {
	defer func() {
		clear(d.pending)
		d.pending = d.pending[:0]
	}()
	for _, p := range d.pending {
		var ferr error
		select {
		case <-p.f.Ok():
			d.published++
			continue
		case ferr = <-p.f.Err():
		case <-time.After(d.timeout):
			ferr = fmt.Errorf("no acknowledgement within %v", d.timeout)
		}
		if err := d.publishSync(p.msg, p.id, ferr); err != nil {
			// The commit fails with this error and the worker stops; the
			// messages are read again after a restart.
			return d.published, err
		}
	}
	return d.published, nil
}

func (d *DeadLetters) publishSync(m *nats.Msg, id string, cause error) error {
	for attempt := 0; attempt < 3; attempt++ {
		ctx, cancel := context.WithTimeout(context.Background(), d.timeout)
		_, err := d.js.PublishMsg(ctx, m, jetstream.WithMsgID(id))
		cancel()
		if err == nil {
			d.published++
			return nil
		}
		cause = err
		time.Sleep(time.Duration(attempt+1) * 200 * time.Millisecond)
	}
	return fmt.Errorf("dead letter %s to %s: %w", id, m.Subject, cause)
}

// headerSafe keeps a header value on one line.
func headerSafe(s string) string {
	b := []byte(s)
	for i, c := range b {
		if c == '\r' || c == '\n' {
			b[i] = ' '
		}
	}
	return string(b)
}
