package stream

import (
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
func PartitionOf(user string, n int) int {
	h := fnv.New32a()
	h.Write([]byte(UserKey(user)))
	return int(h.Sum32() % uint32(n))
}

// UserFilter is the subject filter of every stored message of a user:
// <prefix>.ev.*.*.<UserKey(user)>.
func (c Config) UserFilter(user string) string {
	return c.Prefix + ".ev.*.*." + UserKey(user)
}

// PurgeUser deletes the user's messages from the events stream with a
// subject-filtered purge (UserFilter) and returns how many it deleted.
// Messages the worker has not read yet are simply never delivered; the
// consumer's delivery sequence stays gapless.
func PurgeUser(ctx context.Context, js jetstream.JetStream, cfg Config, user string) (uint64, error) {
	body, err := json.Marshal(map[string]string{"filter": cfg.UserFilter(user)})
	if err != nil {
		return 0, err
	}
	// The purge count is in the API's reply, which jetstream's Purge drops:
	// ask the API directly.
	m, err := js.Conn().RequestWithContext(ctx, apiPrefix(js)+"STREAM.PURGE."+cfg.Stream, body)
	if err != nil {
		return 0, fmt.Errorf("purge %s: %w", cfg.Stream, err)
	}
	var r struct {
		Success bool   `json:"success"`
		Purged  uint64 `json:"purged"`
		Error   *struct {
			Code        int    `json:"code"`
			Description string `json:"description"`
		} `json:"error"`
	}
	if err := json.Unmarshal(m.Data, &r); err != nil {
		return 0, fmt.Errorf("purge %s: reply: %w", cfg.Stream, err)
	}
	if r.Error != nil {
		return 0, fmt.Errorf("purge %s: %s (%d)", cfg.Stream, r.Error.Description, r.Error.Code)
	}
	if !r.Success {
		return 0, fmt.Errorf("purge %s: not successful", cfg.Stream)
	}
	return r.Purged, nil
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
	}
	return rep
}
