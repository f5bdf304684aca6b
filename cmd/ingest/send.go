package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"os"
	"os/signal"
	"syscall"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/touchledger/touchledger/internal/cli"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/stream"
)

const sendUsage = `ingest send: publish a JSON-lines file of events to the bus.

Usage:
  ingest send [--nats URL] [--rate N] [options] FILE|-

Each line goes to <prefix>.in.<kind>.<user key> (the server's mapping picks
the partition from the user key) with the event id as the message id
(Nats-Msg-Id), so the stream drops a line sent twice within its
de-duplication window. Lines that are not valid events are published too (to
a subject from their hash) and the worker rejects them into the dead-letter
stream with the reason. FILE "-" reads standard input; gzip is recognised. A
progress bar is drawn on standard error when it is a terminal. The stream
must exist: a worker creates it when it starts.

The input order is kept across failures: when an acknowledgement fails or
the server goes away (a worker hosting the embedded server restarted),
send reconnects and publishes again from the oldest unacknowledged line
onward, in order; the stream drops what it already had by message id. It
keeps trying for --retry-for, then exits 1 naming the line it could not
deliver (every earlier line is in the stream).

Options:
`

func runSend(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("ingest send", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var (
		o        = stream.DefaultSendOptions()
		progress = fs.Bool("progress", isTerminal(os.Stderr), "draw a progress bar on standard error (default: when it is a terminal)")
	)
	nf := cli.AddNATS(fs, "nats://127.0.0.1:4222", "NATS server `url`s (comma-separated)")
	fs.StringVar(&o.Prefix, "prefix", o.Prefix, "subject `prefix`")
	fs.Float64Var(&o.Rate, "rate", 0, "publish at most this many `events` per second (0 = as fast as the stream acknowledges)")
	fs.IntVar(&o.MaxInFlight, "max-in-flight", o.MaxInFlight, "most `messages` published and not yet acknowledged")
	cli.DurationVar(fs, &o.RetryFor, "retry-for", o.RetryFor, "keep re-publishing this `long` while the oldest unacknowledged line fails (the server down, the stream missing)")
	cfgPath := fs.String("config", "", "configuration `file`: with privacy.key_file (or $TOUCHLEDGER_KEY_FILE) subjects carry the pseudonym's key, not the raw id's")
	version := cli.AddVersion(fs)
	fs.Usage = func() {
		fmt.Fprint(stderr, sendUsage)
		fs.PrintDefaults()
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		return 2
	}
	if *version {
		fmt.Fprintln(stdout, cli.Version("ingest send"))
		return 0
	}
	if fs.NArg() != 1 {
		fmt.Fprintln(stderr, "ingest send: give one FILE (or - for standard input); see --help")
		return 2
	}
	cfg, err := loadConfig(*cfgPath)
	if err != nil {
		fmt.Fprintf(stderr, "ingest send: %v\n", err)
		return 2
	}
	ps, err := pipeline.PseudonymsFrom(cfg)
	if err != nil {
		fmt.Fprintf(stderr, "ingest send: %v\n", err)
		return 2
	}
	if ps != nil {
		o.SubjectUser = ps.Pseudonym
	}
	path := fs.Arg(0)
	var in io.Reader = os.Stdin
	if path != "-" {
		f, err := os.Open(path)
		if err != nil {
			fmt.Fprintf(stderr, "ingest send: %v\n", err)
			return 1
		}
		defer f.Close()
		if st, err := f.Stat(); err == nil {
			o.Size = st.Size()
		}
		in = f
	}
	if *progress {
		o.Progress = stderr
	}
	log := slog.New(slog.NewTextHandler(stderr, &slog.HandlerOptions{Level: slog.LevelWarn}))
	// Connections that do not reconnect by themselves: on a loss Send
	// dials a new one and re-publishes from the oldest unacknowledged line
	// in order, so a worker restarted with its embedded server gets the
	// input in order.
	copts, err := nf.Options("touchledger send")
	if err == nil {
		copts.NoReconnect = true
		err = copts.Validate()
	}
	if err != nil {
		fmt.Fprintf(stderr, "ingest send: %v\n", err)
		return 2
	}
	o.Dial = func(context.Context) (jetstream.JetStream, error) {
		nc, err := stream.Connect(copts, log)
		if err != nil {
			return nil, err
		}
		// The async window of the JetStream context covers Send's.
		js, err := jetstream.New(nc, jetstream.WithPublishAsyncMaxPending(max(o.MaxInFlight, 4000)))
		if err != nil {
			nc.Close()
			return nil, err
		}
		return js, nil
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	st, err := stream.Send(ctx, nil, in, o)
	fmt.Fprintf(stdout, "sent %s: %d lines, %d stored, %d already in the stream, %d not valid events, %d rewinds (%.2fs, %.0f/s)\n",
		path, st.Lines, st.Stored, st.Duplicates, st.Unparsed, st.Rewinds, st.Took.Seconds(), float64(st.Lines)/max(st.Took.Seconds(), 1e-9))
	if err != nil {
		if errors.Is(err, nats.ErrNoResponders) || errors.Is(err, jetstream.ErrNoStreamResponse) {
			err = fmt.Errorf("%w (no stream takes %s.in.* subjects: is a worker running? it creates the stream and the embedded server maps the subjects)", err, o.Prefix)
		}
		fmt.Fprintf(stderr, "ingest send: %v\n", err)
		return 1
	}
	return 0
}

// isTerminal reports whether f is a character device (a terminal, not a
// file or a pipe).
func isTerminal(f *os.File) bool {
	st, err := f.Stat()
	return err == nil && st.Mode()&os.ModeCharDevice != 0
}
