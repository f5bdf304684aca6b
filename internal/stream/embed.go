package stream

import (
	"fmt"
	"log/slog"
	"path/filepath"
	"time"

	"github.com/nats-io/nats-server/v2/server"
)

// EmbedOption adjusts StartEmbedded.
type EmbedOption func(*embedOptions)

type embedOptions struct {
	port    int
	cfg     Config
	log     *slog.Logger
	name    string
	timeout time.Duration
	auth    *LocalAuth
}

// EmbedPort sets the client port on 127.0.0.1; 0 picks a free one (the
// default is 4222, the NATS port).
func EmbedPort(port int) EmbedOption { return func(o *embedOptions) { o.port = port } }

// EmbedConfig sets the subject prefix and partition count of the mapping
// (default DefaultConfig()).
func EmbedConfig(c Config) EmbedOption { return func(o *embedOptions) { o.cfg = c } }

// EmbedLogger sends the server's log to log (default: discarded).
func EmbedLogger(log *slog.Logger) EmbedOption { return func(o *embedOptions) { o.log = log } }

// EmbedName sets the server name (default "touchledger").
func EmbedName(name string) EmbedOption { return func(o *embedOptions) { o.name = name } }

// DefaultPort is the embedded server's client port unless EmbedPort says otherwise.
const DefaultPort = 4222

// StartEmbedded starts a NATS server in this process: JetStream storing
// under dir/nats, clients on 127.0.0.1 only, and the input partition mapping
// (Config.InputSubjects → Config.PartitionMapping) on its account. It returns
// the server and its client URL; the caller shuts it down with Shutdown and
// WaitForShutdown.
func StartEmbedded(dir string, opts ...EmbedOption) (*server.Server, string, error) {
	o := embedOptions{port: DefaultPort, cfg: DefaultConfig(), name: "touchledger", timeout: 10 * time.Second}
	for _, f := range opts {
		f(&o)
	}
	if err := o.cfg.Validate(); err != nil {
		return nil, "", err
	}
	port := o.port
	if port == 0 {
		port = server.RANDOM_PORT
	}
	sopts := &server.Options{
		ServerName: o.name,
		Host:       "127.0.0.1",
		Port:       port,
		JetStream:  true,
		StoreDir:   filepath.Join(dir, "nats"),
		NoSigs:     true, // the process handles its own signals
		NoLog:      true, // logging goes through SetLoggerV2 below
	}
	var auth *localAuth
	if o.auth != nil {
		auth = &localAuth{a: *o.auth, prefix: o.cfg.Prefix}
		sopts.CustomClientAuthentication = auth
	}
	s, err := server.NewServer(sopts)
	if err != nil {
		return nil, "", fmt.Errorf("embedded nats: %w", err)
	}
	if o.log == nil {
		o.log = slog.New(slog.DiscardHandler)
	}
	logger := slogAdapter{log: o.log, fatal: make(chan string, 1)}
	s.SetLoggerV2(logger, false, false, false)
	// The mapping is in place before the server accepts a client.
	if err := s.GlobalAccount().AddMapping(o.cfg.InputSubjects(), o.cfg.PartitionMapping()); err != nil {
		return nil, "", fmt.Errorf("embedded nats: partition mapping: %w", err)
	}
	s.Start()
	if auth != nil {
		if err := auth.setup(s); err != nil {
			s.Shutdown()
			return nil, "", err
		}
	}
	// A fatal start-up error (a port in use) is logged, not returned: watch
	// for it while waiting.
	for deadline := time.Now().Add(o.timeout); !s.ReadyForConnections(50 * time.Millisecond); {
		select {
		case msg := <-logger.fatal:
			s.Shutdown()
			return nil, "", fmt.Errorf("embedded nats: %s", msg)
		default:
		}
		if time.Now().After(deadline) {
			s.Shutdown()
			return nil, "", fmt.Errorf("embedded nats: not ready for connections after %v", o.timeout)
		}
	}
	if !s.JetStreamEnabled() {
		s.Shutdown()
		return nil, "", fmt.Errorf("embedded nats: jetstream did not start (store %s)", sopts.StoreDir)
	}
	return s, s.ClientURL(), nil
}

// slogAdapter writes the server's log lines to slog. The server reports
// fatal errors through Fatalf and expects the logger to end the process;
// here the first one is handed to StartEmbedded instead.
type slogAdapter struct {
	log   *slog.Logger
	fatal chan string
}

func (a slogAdapter) Noticef(format string, v ...any) {
	a.log.Info(fmt.Sprintf(format, v...), "from", "nats")
}
func (a slogAdapter) Warnf(format string, v ...any) {
	a.log.Warn(fmt.Sprintf(format, v...), "from", "nats")
}
func (a slogAdapter) Fatalf(format string, v ...any) {
	msg := fmt.Sprintf(format, v...)
	a.log.Error(msg, "from", "nats")
	select {
	case a.fatal <- msg:
	default:
	}
}
func (a slogAdapter) Errorf(format string, v ...any) {
	a.log.Error(fmt.Sprintf(format, v...), "from", "nats")
}
func (a slogAdapter) Debugf(format string, v ...any) {
	a.log.Debug(fmt.Sprintf(format, v...), "from", "nats")
}
func (a slogAdapter) Tracef(format string, v ...any) {
	a.log.Debug(fmt.Sprintf(format, v...), "from", "nats")
}
