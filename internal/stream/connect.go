package stream

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net/url"
	"strings"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
)

// ConnectOptions say how to reach an existing NATS server or cluster. At
// most one of User/Password, Token, NKeyFile and CredsFile is used.
type ConnectOptions struct {
	URL       string // one or more comma-separated server URLs
	Name      string // connection name shown by the server (default "touchledger")
	User      string
	Password  string
	Token     string
	NKeyFile  string // NKey seed file
	CredsFile string // user JWT + seed credentials file
	CAFile    string // TLS: CA certificates to trust
	CertFile  string // TLS: client certificate (with KeyFile)
	KeyFile   string
	// NoReconnect: the connection closes on the first loss instead of
	// reconnecting by itself (Send then dials a new one and re-publishes
	// in order; see SendOptions.Dial).
	NoReconnect bool
}

// Validate checks that the options are complete and not contradictory.
func (o ConnectOptions) Validate() error {
	if o.URL == "" {
		return errors.New("nats: url is empty")
	}
	n := 0
	for _, set := range []bool{o.User != "" || o.Password != "", o.Token != "", o.NKeyFile != "", o.CredsFile != ""} {
		if set {
			n++
		}
	}
	if n > 1 {
		return errors.New("nats: give one of user/password, token, nkey seed file or credentials file")
	}
	if (o.User == "") != (o.Password == "") {
		return errors.New("nats: a user and a password go together")
	}
	if (o.CertFile == "") != (o.KeyFile == "") {
		return errors.New("nats: a client certificate needs both the certificate and the key file")
	}
	return nil
}

// Connect connects with o. Unless o.NoReconnect, it reconnects forever
// after a connection loss, logging disconnections and reconnections to log.
func Connect(o ConnectOptions, log *slog.Logger) (*nats.Conn, error) {
	if err := o.Validate(); err != nil {
		return nil, err
	}
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	name := o.Name
	if name == "" {
		name = "touchledger"
	}
	opts := []nats.Option{
		nats.Name(name),
		nats.MaxReconnects(-1),
		nats.ReconnectWait(500 * time.Millisecond),
		nats.DisconnectErrHandler(func(_ *nats.Conn, err error) {
			if err != nil {
				log.Warn("nats disconnected", "err", err)
			}
		}),
		nats.ReconnectHandler(func(nc *nats.Conn) { log.Info("nats reconnected", "url", nc.ConnectedUrlRedacted()) }),
		nats.ErrorHandler(func(_ *nats.Conn, sub *nats.Subscription, err error) {
			subj := ""
			if sub != nil {
				subj = sub.Subject
			}
			log.Warn("nats error", "subject", subj, "err", err)
		}),
	}
	if o.NoReconnect {
		opts = append(opts, nats.NoReconnect())
	}
	switch {
	case o.User != "" || o.Password != "":
		opts = append(opts, nats.UserInfo(o.User, o.Password))
	case o.Token != "":
		opts = append(opts, nats.Token(o.Token))
	case o.NKeyFile != "":
		opt, err := nats.NkeyOptionFromSeed(o.NKeyFile)
		if err != nil {
			return nil, fmt.Errorf("nats: nkey seed file: %w", err)
		}
		opts = append(opts, opt)
	case o.CredsFile != "":
		opts = append(opts, nats.UserCredentials(o.CredsFile))
	}
	if o.CAFile != "" {
		opts = append(opts, nats.RootCAs(o.CAFile))
	}
	if o.CertFile != "" {
		opts = append(opts, nats.ClientCert(o.CertFile, o.KeyFile))
	}
	nc, err := nats.Connect(o.URL, opts...)
	if err != nil {
		return nil, fmt.Errorf("nats: connect %s: %w", RedactURLs(o.URL), err)
	}
	return nc, nil
}

// EnsureStreamRetry is EnsureStream retried for up to StartRetry while a
// cluster elects its JetStream leader (requests then fail with "not
// available" or time out), waiting 200 ms, doubling up to 5 s, between
// tries. Each try has 10 s.
func EnsureStreamRetry(ctx context.Context, js jetstream.JetStream, cfg Config, log *slog.Logger) error {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	deadline := time.Now().Add(StartRetry)
	wait := 200 * time.Millisecond
	for {
		sctx, cancel := context.WithTimeout(ctx, 10*time.Second)
		err := EnsureStream(sctx, js, cfg)
		cancel()
		if err == nil || ctx.Err() != nil || time.Now().After(deadline) {
			return err
		}
		log.Warn("creating the streams; retrying", "err", err, "in", wait)
		select {
		case <-time.After(wait):
		case <-ctx.Done():
			return ctx.Err()
		}
		wait = min(2*wait, 5*time.Second)
	}
}

// EnsureStream creates the events stream (subjects <prefix>.ev.>) and the
// dead-letter stream (<prefix>.dead.>), or updates them to cfg: file
// storage, limits retention, cfg's replicas, max age and de-duplication
// windows.
func EnsureStream(ctx context.Context, js jetstream.JetStream, cfg Config) error {
	if err := cfg.Validate(); err != nil {
		return err
	}
	for _, sc := range []jetstream.StreamConfig{
		{
			Name:        cfg.Stream,
			Description: "touchledger input events, partitioned by user",
			Subjects:    []string{cfg.EventSubjects()},
			Duplicates:  cfg.Duplicates,
		},
		{
			Name:        cfg.DeadStream,
			Description: "touchledger dead letters: rejected and late events with their reason",
			Subjects:    []string{cfg.DeadSubjects()},
			Duplicates:  cfg.DeadDuplicates,
		},
	} {
		sc.Storage = jetstream.FileStorage
		sc.Retention = jetstream.LimitsPolicy
		sc.Discard = jetstream.DiscardOld
		sc.Replicas = cfg.Replicas
		sc.MaxAge = cfg.MaxAge
		if _, err := js.CreateOrUpdateStream(ctx, sc); err != nil {
			return fmt.Errorf("stream %s: %w", sc.Name, err)
		}
	}
	return nil
}

// RedactURLs hides the passwords of comma-separated server URLs, for
// messages and logs.
func RedactURLs(urls string) string {
	parts := strings.Split(urls, ",")
	for i, p := range parts {
		if u, err := url.Parse(strings.TrimSpace(p)); err == nil && u.User != nil {
			parts[i] = u.Redacted()
		}
	}
	return strings.Join(parts, ",")
}
