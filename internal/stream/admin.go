package stream

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"hash/fnv"
	"log/slog"
	"strings"
	"time"
	"unicode/utf8"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/touchledger/touchledger/internal/pipeline"
)

// ForgetSubject is the erasure request subject every worker serves:
// <prefix>.admin.forget. In deploy/ only the admin may publish to
// <prefix>.admin.>.
func ForgetSubject(prefix string) string { return prefix + ".admin.forget" }

// ForgetRequest is the body of an erasure request.
type ForgetRequest struct {
	User string `json:"user"` // the raw user id, as publishers send it
}

// ForgetReply is one worker's answer to an erasure request: the
// processor's report and the purge, or Error. Every worker answers, for its
// own partitions; the person's state and messages are with the worker that
// owns their partition (Owner).
type ForgetReply struct {
	*pipeline.ForgetReport        // nil on error
	Partitions             string `json:"partitions"`             // the answering worker's range, "0-7"
	Partition              int    `json:"partition"`              // the person's partition (PartitionOf)
	Owner                  bool   `json:"owner"`                  // Partition is in Partitions
	Purged                 uint64 `json:"purged"`                 // the person's messages deleted from the events stream
	PurgedDead             uint64 `json:"purged_dead"`            // the person's dead letters erased
	PurgeFilter            string `json:"purge_filter,omitempty"` // the subject filter of the purge (owner only)
	Error                  string `json:"error,omitempty"`
}

// maxForgetUser bounds the user id of an erasure request (the event
// contract's own limit is smaller; this only keeps requests sane).
const maxForgetUser = 4096

// PartitionOf returns the partition the server's mapping sends a user's
// events to: partition(n, ukey) of JetStream's deterministic subject
// mapping, FNV-1a 32 of the user key token modulo n (nats-server
// subject_transform.go; deploy/nats/README.md gives the worked example
// shopper-1 → key 86d32d48dd04ae81 → partition 9 of 16).
func PartitionOf(user string, n int) int { return partitionOfKey(UserKey(user), n) }

func partitionOfKey(key string, n int) int {
	h := fnv.New32a()
	h.Write([]byte(key))
	return int(h.Sum32() % uint32(n))
}

// UserFilter is the subject filter of every stored message of a user:
// <prefix>.ev.*.*.<UserKey(user)>.
func (c Config) UserFilter(user string) string {
	return c.Prefix + ".ev.*.*." + UserKey(user)
}

// PurgeUser erases the user's messages from the events stream, each with
// a secure delete (the server overwrites the message in its block file
// with random bytes, so the person's payload does not stay on disk as a
// subject purge leaves it), and returns how many it erased. Messages the
// worker has not read yet are simply never delivered.
func PurgeUser(ctx context.Context, js jetstream.JetStream, cfg Config, user string) (uint64, error) {
	s, err := js.Stream(ctx, cfg.Stream)
	if err != nil {
		return 0, fmt.Errorf("erase from %s: %w", cfg.Stream, err)
	}
	seqs, err := matching(ctx, s, cfg.UserFilter(user), nil)
	if err != nil {
		return 0, fmt.Errorf("erase from %s: %w", cfg.Stream, err)
	}
	return secureDelete(ctx, s, seqs)
}

// PurgeDeadLetters erases the user's dead letters (secure delete): those
// whose Tl-Subject header carries the user's subject key (subjectUser is
// what the key is computed from: the id or its pseudonym), and those whose
// payload names the user (raw id, when no key redacts the payloads).
func PurgeDeadLetters(ctx context.Context, js jetstream.JetStream, cfg Config, rawUser, subjectUser string) (uint64, error) {
	s, err := js.Stream(ctx, cfg.DeadStream)
	if err != nil {
		return 0, fmt.Errorf("erase from %s: %w", cfg.DeadStream, err)
	}
	key := "." + UserKey(subjectUser)
	quoted, _ := json.Marshal(rawUser)
	seqs, err := matching(ctx, s, cfg.DeadSubjects(), func(m jetstream.Msg) bool {
		if strings.HasSuffix(m.Headers().Get(HeaderSubject), key) {
			return true
		}
		var body struct {
			User *string `json:"user"`
		}
		if json.Unmarshal(m.Data(), &body) == nil {
			return body.User != nil && *body.User == rawUser
		}
		return bytes.Contains(m.Data(), quoted) // not JSON: the id quoted anywhere
	})
	if err != nil {
		return 0, fmt.Errorf("erase from %s: %w", cfg.DeadStream, err)
	}
	return secureDelete(ctx, s, seqs)
}

// matching returns the sequences of the stream's messages on filter for
// which keep holds (every one when keep is nil): those stored when it is
// called, read with an ordered consumer.
func matching(ctx context.Context, s jetstream.Stream, filter string, keep func(jetstream.Msg) bool) ([]uint64, error) {
	info, err := s.Info(ctx, jetstream.WithSubjectFilter(filter))
	if err != nil {
		return nil, err
	}
	var total uint64
	for _, c := range info.State.Subjects {
		total += c
	}
	if total == 0 {
		return nil, nil
	}
	oc, err := s.OrderedConsumer(ctx, jetstream.OrderedConsumerConfig{FilterSubjects: []string{filter}})
	if err != nil {
		return nil, err
	}
	var seqs []uint64
	for read := uint64(0); read < total; {
		batch, err := oc.Fetch(int(min(total-read, 1024)), jetstream.FetchMaxWait(5*time.Second))
		if err != nil {
			return nil, err
		}
		got := 0
		for m := range batch.Messages() {
			got++
			md, err := m.Metadata()
			if err != nil {
				return nil, err
			}
			if keep == nil || keep(m) {
				seqs = append(seqs, md.Sequence.Stream)
			}
		}
		if got == 0 {
			return nil, fmt.Errorf("read %d of the %d messages on %s: %w", read, total, filter, batch.Error())
		}
		read += uint64(got)
	}
	return seqs, nil
}

// secureDelete erases each sequence; one already gone counts as erased.
func secureDelete(ctx context.Context, s jetstream.Stream, seqs []uint64) (uint64, error) {
	var n uint64
	for _, seq := range seqs {
		if err := s.SecureDeleteMsg(ctx, seq); err != nil && !errors.Is(err, jetstream.ErrMsgNotFound) {
			return n, fmt.Errorf("secure delete %d: %w", seq, err)
		}
		n++
	}
	return n, nil
}

// apiPrefix is the JetStream API prefix js sends requests under.
func apiPrefix(js jetstream.JetStream) string {
	o := js.Options()
	switch {
	case o.APIPrefix != "":
		if strings.HasSuffix(o.APIPrefix, ".") {
			return o.APIPrefix
		}
		return o.APIPrefix + "."
	case o.Domain != "":
		return "$JS." + o.Domain + ".API."
	}
	return jetstream.DefaultAPIPrefix
}

// ForgetTimeout bounds the work of one erasure request on the worker.
const ForgetTimeout = 30 * time.Second

// ServeAdmin answers erasure requests on ForgetSubject (every worker, no
// queue group): it hands the request to Run's goroutine (Forget), then, if
// the person's partition is the worker's, purges their messages from the
// events stream (PurgeUser), and replies with a ForgetReply. Requests are
// served one at a time. Unsubscribe before the processor is closed.
func (w *Worker) ServeAdmin(nc *nats.Conn, log *slog.Logger) (*nats.Subscription, error) {
	if log == nil {
		log = w.log
	}
	return nc.Subscribe(ForgetSubject(w.cfg.Prefix), func(m *nats.Msg) {
		rep := w.serveForget(m.Data)
		if rep.Error != "" {
			log.Warn("erasure request failed", "err", rep.Error)
		} else {
			log.Info("erased", "user", rep.User, "had_state", rep.HadState, "owner", rep.Owner, "purged", rep.Purged)
		}
		body, err := json.Marshal(rep)
		if err != nil {
			return
		}
		if m.Reply != "" {
			if err := m.Respond(body); err != nil {
				log.Warn("erasure reply", "err", err)
			}
		}
	})
}

func (w *Worker) serveForget(data []byte) ForgetReply {
	rep := ForgetReply{Partitions: w.parts.String(), Partition: -1}
	var req ForgetRequest
	if err := json.Unmarshal(data, &req); err != nil {
		rep.Error = fmt.Sprintf("forget request: %v", err)
		return rep
	}
	switch {
	case req.User == "":
		rep.Error = "forget request: user is empty"
		return rep
	case len(req.User) > maxForgetUser || !utf8.ValidString(req.User):
		rep.Error = fmt.Sprintf("forget request: user must be valid UTF-8 of at most %d bytes", maxForgetUser)
		return rep
	}
	su := req.User
	if w.cfg.SubjectUser != nil {
		su = w.cfg.SubjectUser(su)
	}
	rep.Partition = PartitionOf(su, w.cfg.Partitions)
	rep.Owner = rep.Partition >= w.parts.First && rep.Partition <= w.parts.Last
	ctx, cancel := context.WithTimeout(context.Background(), ForgetTimeout)
	defer cancel()
	fr, err := w.Forget(ctx, req.User)
	if err != nil {
		if errors.Is(err, ErrWorkerStopped) {
			rep.Error = "the worker is stopping"
		} else {
			rep.Error = err.Error()
		}
		return rep
	}
	rep.ForgetReport = &fr
	if rep.Owner {
		rep.PurgeFilter = w.cfg.UserFilter(su)
		n, err := PurgeUser(ctx, w.js, w.cfg, su)
		if err != nil {
			rep.Error = fmt.Sprintf("state erased, but the stream purge failed (send the request again): %v", err)
		}
		rep.Purged = n
		if err == nil {
			d, err := PurgeDeadLetters(ctx, w.js, w.cfg, req.User, su)
			if err != nil {
				rep.Error = fmt.Sprintf("state and stream erased, but the dead-letter purge failed (send the request again): %v", err)
			}
			rep.PurgedDead = d
		}
	}
	return rep
}
