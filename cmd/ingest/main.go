// Command ingest feeds events into a touchledger data directory.
//
//	ingest --data DIR                   live: consume the bus (embedded NATS unless --nats URL)
//	ingest --data DIR --replay FILE     replay a JSON-lines file ("-" = stdin, .gz accepted)
//	ingest send [--nats URL] FILE       publish a JSON-lines file to the bus
//	ingest --print-config               print the effective configuration
//
// See README.md and `ingest --help`.
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
	"path/filepath"
	"runtime/debug"
	"syscall"
	"time"

	"github.com/touchledger/touchledger/internal/cli"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/state"
)

const usage = `ingest: feed clickstream and ad-exposure events into a touchledger data directory.

Usage:
  ingest --data DIR [--nats URL] [--partitions 0-7] [--http ADDR] [--config FILE]   live
  ingest send [--nats URL] [--rate N] FILE|-                                          publish
  ingest --data DIR --replay FILE [--rejects FILE] [--source NAME] [--config FILE]  replay
  ingest backup --from http://127.0.0.1:9464 --out FILE | --data DIR --out FILE  point-in-time copy
  ingest restore --in FILE --data DIR                                                rebuild a directory
  ingest clock --data DIR [--set-latest TIME --repair]                               show or repair the event clock
  ingest verify --data DIR                                                           check a directory end to end
  ingest --print-config [--config FILE]

Live (no --replay) consumes events from NATS JetStream until SIGINT or
SIGTERM. Without --nats it starts an embedded NATS server in this process,
listening on 127.0.0.1 only (--port, default 4222) with JetStream storing
under DIR/nats, and prints its client URL; with --nats it connects to an
existing server or cluster (auth: --nats-user/--nats-password, --nats-token,
--nats-nkey or --nats-creds; TLS: --nats-ca, --nats-cert, --nats-key).

Subjects: publishers send each event to tl.in.<kind>.<user key> (kind touch
or action; user key = 16 hex digits of xxhash64 of the user id) with the
event id as Nats-Msg-Id. The server maps tl.in.*.* to
tl.ev.{{partition(16,2)}}.<kind>.<user key>, so one user's events always
land in one of 16 partitions; stream TL_EVENTS holds tl.ev.>. A worker owns
--partitions (default all) through the durable consumer
tl-worker-<first>-<last> and keeps its own data directory. Rejected and late
events go to stream TL_DEAD as tl.dead.<reason>, with headers Tl-Reason,
Tl-Subject and Tl-Stream-Seq.

Every event counts exactly once across kill -9, redelivery and publisher
retries: the stream position is committed with the state in one
transaction, the consumer restarts from it, and messages are acknowledged
only after the commit. Event time follows the wall clock while the input is
quiet, so sessions close on quiet nights too. SIGINT/SIGTERM stops fetching,
commits what was read (events inside the allowed lateness stay buffered in
the store) and exits 0.

HTTP (--http, default 127.0.0.1:9464; "off" disables): /metrics
(Prometheus), /healthz, /readyz, and the JSON/CSV API under /api/ (credit,
shift, transitions, paths, funnel, alerts, status). The worker also answers
query --nats for its partitions.

Feeds on NATS: each abandonment alert that opens or closes is published
once to tl.alert.<name> (the alert as query alerts shows it, with "event":
"opened" or "closed" and the worker's "partitions"), judged on final
intervals only (ending a session gap before the watermark); what was
announced is kept in DIR/feeds.json across restarts. Every --report-interval
(default 1m; 0 disables) a credit snapshot per model over --report-window
(default 7d) goes to tl.report.credit. Erasure: the worker answers
tl.admin.forget ({"user": "ID"}; query forget --nats) by deleting the
person's state and purging their messages from TL_EVENTS.

Replay reads one JSON event per line (FILE "-" reads standard input; gzip is
recognised), orders events by event time within the allowed lateness, splits
them into sessions and journeys, credits channels under every rule-based model
and commits the state with the input position in one transaction. It exits 0
once everything is committed and prints one summary line. Running the same
file again, or again after the process was killed, resumes where the last
commit ended: every event counts exactly once. Invalid lines and late events
go to the rejects file (default DIR/rejects.jsonl) as JSON lines with the
line number, a reason code and the original text.

See "ingest send --help" for publishing.

Options:
`

// defaultMemoryLimit is the Go heap's soft limit unless GOMEMLIMIT is set:
// the garbage collector works harder near it instead of letting the heap
// double, which keeps a large replay under about 600 MiB resident (Badger's
// memtables and caches come on top of the heap).
const defaultMemoryLimit = 400 << 20

func main() {
	if os.Getenv("GOMEMLIMIT") == "" {
		debug.SetMemoryLimit(defaultMemoryLimit)
	}
	os.Exit(run(os.Args[1:], os.Stdout, os.Stderr))
}

func run(args []string, stdout, stderr io.Writer) int {
	if len(args) > 0 {
		switch args[0] {
		case "send":
			return runSend(args[1:], stdout, stderr)
		case "backup":
			return runBackup(args[1:], stdout, stderr)
		case "restore":
			return runRestore(args[1:], stdout, stderr)
		case "clock":
			return runClock(args[1:], stdout, stderr)
		case "verify":
			return runVerify(args[1:], stdout, stderr)
		}
	}
	fs := flag.NewFlagSet("ingest", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var (
		dataDir     = fs.String("data", "", "data `directory` (created if missing)")
		replay      = fs.String("replay", "", "JSON-lines `file` to replay; - for standard input")
		rejectsPath = fs.String("rejects", "", "rejects `file` (default DIR/rejects.jsonl)")
		rejectsLost = fs.Bool("rejects-lost", false, "go on when the rejects file is shorter than committed (deleted or cut by hand); its missing records stay lost")
		source      = fs.String("source", "", "`name` identifying the input for resuming (default: the file's absolute path, or \"stdin\")")
		configPath  = fs.String("config", "", "YAML configuration `file` (defaults apply without it)")
		printConfig = fs.Bool("print-config", false, "print the effective configuration and exit")
		verbose     = fs.Bool("v", false, "log commits and progress to standard error")
		version     = cli.AddVersion(fs)
		live        liveFlags
	)
	addLiveFlags(fs, &live)
	fs.Usage = func() {
		fmt.Fprint(stderr, usage)
		fs.PrintDefaults()
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		return 2
	}
	if fs.NArg() > 0 {
		fmt.Fprintf(stderr, "ingest: unexpected argument %q (see --help)\n", fs.Arg(0))
		return 2
	}
	if *version {
		fmt.Fprintln(stdout, cli.Version("ingest"))
		return 0
	}
	cfg := config.Default()
	if *configPath != "" {
		var err error
		if cfg, err = config.Load(*configPath); err != nil {
			fmt.Fprintf(stderr, "ingest: %v\n", err)
			return 2
		}
	}
	if *printConfig {
		b, err := cfg.YAML()
		if err != nil {
			fmt.Fprintf(stderr, "ingest: %v\n", err)
			return 1
		}
		stdout.Write(b)
		return 0
	}
	if *dataDir == "" {
		fmt.Fprintln(stderr, "ingest: --data is required (see --help)")
		return 2
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	if *replay == "" {
		level := slog.LevelInfo
		if *verbose {
			level = slog.LevelDebug
		}
		hopts := &slog.HandlerOptions{Level: level}
		var h slog.Handler
		switch live.logFormat {
		case "text":
			h = slog.NewTextHandler(stderr, hopts)
		case "json":
			h = slog.NewJSONHandler(stderr, hopts)
		default:
			fmt.Fprintf(stderr, "ingest: --log-format %q: want text or json\n", live.logFormat)
			return 2
		}
		if err := runLive(ctx, cfg, *dataDir, live, stdout, slog.New(h)); err != nil {
			fmt.Fprintf(stderr, "ingest: %v\n", err)
			return 1
		}
		return 0
	}
	level := slog.LevelWarn
	if *verbose {
		level = slog.LevelDebug
	}
	log := slog.New(slog.NewTextHandler(stderr, &slog.HandlerOptions{Level: level}))
	if err := replayFile(ctx, cfg, *dataDir, *replay, *rejectsPath, *source, *rejectsLost, stdout, log); err != nil {
		fmt.Fprintf(stderr, "ingest: %v\n", err)
		return 1
	}
	return 0
}

func replayFile(ctx context.Context, cfg config.Config, dir, path, rejectsPath, source string, rejectsLost bool, stdout io.Writer, log *slog.Logger) error {
	var in io.Reader
	if path == "-" {
		in = os.Stdin
		if source == "" {
			source = "stdin"
		}
	} else {
		f, err := os.Open(path)
		if err != nil {
			return fmt.Errorf("open input: %w", err)
		}
		defer f.Close()
		in = f
		if source == "" {
			abs, err := filepath.Abs(path)
			if err != nil {
				return err
			}
			source = abs
		}
	}
	// The key before the directory: a bad key file creates nothing.
	ps, err := pipeline.PseudonymsFrom(cfg)
	if err != nil {
		return err
	}
	st, err := state.Open(ctx, pipeline.StoreOptions(dir, cfg))
	if err != nil {
		return err
	}
	defer st.Close()
	if err := pipeline.CheckKey(ctx, st, ps); err != nil {
		return err
	}
	if rejectsPath == "" {
		rejectsPath = filepath.Join(dir, "rejects.jsonl")
	}
	rf, err := pipeline.OpenRejectFile(rejectsPath)
	if err != nil {
		return err
	}
	rf.Rotate(int64(cfg.Rejects.MaxMiB)<<20, cfg.Rejects.Keep)
	if rejectsLost {
		rf.AcceptLoss()
	}
	defer rf.Close()
	pcfg := pipeline.FromConfig(cfg)
	pcfg.Pseudonyms = ps
	pcfg.Disk = pipeline.DiskGuard(dir, cfg)
	p, err := pipeline.New(st, pcfg, rf, log)
	if err != nil {
		return err
	}
	start := time.Now()
	cp, err := pipeline.Replay(ctx, p, source, in, cfg.Limits.MaxPayload)
	if cerr := p.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return err
	}
	c := cp.Counts
	fmt.Fprintf(stdout, "replayed %s: accepted %d, duplicate %d, rejected %d, late %d (%.2fs; rejects in %s)\n",
		source, c.Accepted, c.Duplicate, c.RejectedTotal(), c.Late, time.Since(start).Seconds(), rejectsPath)
	return nil
}
