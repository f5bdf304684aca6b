// Command query answers questions from a touchledger data directory or, with
// --nats, from every live worker (their tables added, then the models run).
//
//	query credit      (--data DIR | --nats URL) --model NAME [--order K] [window] [--by channel|campaign] [--format table|json|csv]
//	query shift       (--data DIR | --nats URL) --model NAME [--days 14]
//	query transitions (--data DIR | --nats URL) --level channel|action [--order K]
//	query paths       (--data DIR | --nats URL) --level action|channel [--top N]
//	query funnel      (--data DIR | --nats URL)
//	query alerts      (--data DIR | --nats URL) [--points]
//	query status      (--data DIR | --nats URL)
//	query scorecard   (--data DIR | --nats URL) --truth FILE
//	query forget      (--data DIR | --nats URL) --user ID
//
// Each command takes only its own flags (query COMMAND --help). Exit codes:
// 0 answered, 1 failed (data, I/O, network), 2 called wrongly (the message
// names the flag).
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"time"

	"github.com/nats-io/nats.go"

	"github.com/touchledger/touchledger/internal/cli"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/remote"
	"github.com/touchledger/touchledger/internal/state"
	"github.com/touchledger/touchledger/internal/stream"
)

const usageHead = `query: read channel credit and path statistics from a touchledger data
directory, or from every live worker over NATS.

Usage: query COMMAND SOURCE [flags]

Commands:
`

const usageTail = `  forget       erase a person's stored state (with --nats: on every worker)

SOURCE is exactly one of:
  --data DIR    the data directory of a stopped worker
  --nats URL    ask every running worker (default $NATS_URL; comma-separated
                URLs for a cluster); their tables are added, then the models
                are computed, with the configuration the workers announce
                unless --config FILE is given

Durations everywhere read 30m, 12h, 7d or 1d12h. Exit codes: 0 answered,
1 failed (data, I/O, network), 2 called wrongly (unknown or inapplicable
flag, bad value: the message names it).

Run "query COMMAND --help" for the flags of a command, "query --version"
for the version.
`

// examples are shown by each command's --help.
var examples = map[string][]string{
	"credit":      {"query credit --data tl-data --model linear --last 7d", "query credit --nats nats://127.0.0.1:4222 --model markov --order 2 --format json"},
	"shift":       {"query shift --data tl-data --model position-based --days 7 --chart"},
	"transitions": {"query transitions --data tl-data --level channel --last 7d", "query transitions --data tl-data --level action --from 2026-10-01 --to 2026-10-08"},
	"paths":       {"query paths --data tl-data --level action --top 5"},
	"funnel":      {"query funnel --data tl-data --last 1d12h"},
	"alerts":      {"query alerts --nats nats://127.0.0.1:4222 --last 28d --points"},
	"status":      {"query status --data tl-data"},
	"scorecard":   {"query scorecard --data tl-data --truth truth.json --last 28d"},
	"forget":      {"query forget --data tl-data --user u-123", "query forget --nats nats://127.0.0.1:4222 --user u-123 --format json"},
}

func main() {
	os.Exit(run(os.Args[1:], os.Stdout, os.Stderr))
}

func usage(w io.Writer) {
	fmt.Fprint(w, usageHead)
	for _, k := range query.Kinds {
		fmt.Fprintf(w, "  %-12s %s\n", k, k.Help())
	}
	fmt.Fprint(w, usageTail)
}

// textFlag is one Request parameter as a flag: the text given, if any.
type textFlag struct {
	name  string
	given map[string]string
	bool  bool
}

func (f *textFlag) String() string     { return f.given[f.name] }
func (f *textFlag) Set(s string) error { f.given[f.name] = s; return nil }
func (f *textFlag) IsBoolFlag() bool   { return f.bool }

// source are the flags that say where the data is.
type source struct {
	data, config string
	nats         *cli.NATS
	timeout      time.Duration
	partitions   int
	prefix       string
}

func addSource(fs *flag.FlagSet, timeout time.Duration) *source {
	s := &source{}
	fs.StringVar(&s.data, "data", "", "data `directory` of a stopped worker")
	fs.StringVar(&s.config, "config", "", "YAML configuration `file` (with --nats: instead of the workers' announced configuration)")
	s.nats = cli.AddNATS(fs, "", "NATS server `URL`s (comma-separated): ask the running workers")
	cli.DurationVar(fs, &s.timeout, "timeout", timeout, "with --nats: how long to wait for workers and for each answer")
	fs.IntVar(&s.partitions, "partitions", remote.DefaultPartitions, "with --nats: number of partitions in all")
	fs.StringVar(&s.prefix, "prefix", remote.DefaultPrefix, "with --nats: subject `prefix` of the workers")
	return s
}

// check says which source was given, as a usage error.
func (s *source) check() error {
	switch {
	case s.data == "" && s.nats.URL() == "":
		return errors.New("--data DIR (a stopped worker's directory) or --nats URL (the running workers) is required")
	case s.data != "" && s.nats.URL() != "":
		return errors.New("--data and --nats exclude each other: give one")
	case s.nats.URL() != "" && s.timeout <= 0:
		return fmt.Errorf("--timeout must be positive, got %v", s.timeout)
	case s.nats.URL() != "" && s.partitions < 1:
		return fmt.Errorf("--partitions must be at least 1, got %d", s.partitions)
	}
	return nil
}

func run(args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 {
		usage(stderr)
		return cli.ExitUsage
	}
	switch args[0] {
	case "-h", "-help", "--help", "help":
		usage(stdout)
		return cli.ExitOK
	case "-version", "--version", "version":
		fmt.Fprintln(stdout, cli.Version("query"))
		return cli.ExitOK
	}
	cmd, args := args[0], args[1:]
	if cmd == "forget" {
		return runForget(args, stdout, stderr)
	}
	kind, err := query.ParseKind(cmd)
	if err != nil {
		fmt.Fprintf(stderr, "query: unknown command %q (see query --help)\n", cmd)
		return cli.ExitUsage
	}
	fs := flag.NewFlagSet("query "+cmd, flag.ContinueOnError)
	fs.SetOutput(stderr)
	src := addSource(fs, remote.DefaultTimeout)
	format := fs.String("format", "table", "output `format`: table, json or csv")
	var chart *bool
	if kind == query.KindCredit || kind == query.KindShift {
		chart = fs.Bool("chart", false, "table format: add a text bar chart")
	}
	version := fs.Bool("version", false, "print the version and exit")
	given := map[string]string{}
	for _, p := range kind.Params() {
		help := p.Help
		if p.Default != "" {
			help += " (default " + p.Default + ")"
		}
		fs.Var(&textFlag{name: p.Name, given: given, bool: p.Bool}, p.Name, help)
	}
	fs.Usage = func() { commandUsage(fs, cmd, kind.Help()) }
	if code, done := parse(fs, kind, args, stdout, stderr); done {
		return code
	}
	if *version {
		fmt.Fprintln(stdout, cli.Version("query"))
		return cli.ExitOK
	}
	fail := func(code int, err error) int {
		fmt.Fprintf(stderr, "query %s: %v\n", cmd, err)
		return code
	}
	f, err := query.ParseFormat(*format)
	if err != nil {
		return fail(cli.ExitUsage, fmt.Errorf("--format: %w", err))
	}
	if err := src.check(); err != nil {
		return fail(cli.ExitUsage, err)
	}
	req, err := query.ParseRequest(kind, given)
	if err != nil {
		return fail(cli.ExitUsage, err)
	}
	q, closeSrc, err := src.open(stderr)
	if err != nil {
		var use usageError
		if errors.As(err, &use) {
			return fail(cli.ExitUsage, err)
		}
		return fail(cli.ExitFailure, err)
	}
	defer closeSrc()
	defer q.Close()
	ans, err := q.Answer(req)
	if err != nil {
		if query.IsParamError(err) {
			return fail(cli.ExitUsage, err)
		}
		return fail(cli.ExitFailure, err)
	}
	if w := query.PartialWarning(ans.Missing()); w != "" && f == query.JSON {
		// JSON carries missing_partitions; say it to people too.
		fmt.Fprintf(stderr, "query %s: %s\n", cmd, w)
	}
	o := query.RenderOptions{}
	if chart != nil {
		o.Chart = *chart
	}
	if err := query.Render(stdout, ans, f, o); err != nil {
		return fail(cli.ExitFailure, err)
	}
	return cli.ExitOK
}

// parse parses a command's flags; done reports that the command is over
// (help shown, or a usage error) with its exit code. A flag the command does
// not take is refused naming it, in the words every surface uses for a
// parameter a question does not take.
func parse(fs *flag.FlagSet, kind query.Kind, args []string, stdout, stderr io.Writer) (int, bool) {
	fs.SetOutput(io.Discard)
	err := fs.Parse(args)
	fs.SetOutput(stdout)
	switch {
	case errors.Is(err, flag.ErrHelp):
		fs.Usage()
		return cli.ExitOK, true
	case err != nil:
		msg := err.Error()
		if name, ok := strings.CutPrefix(msg, "flag provided but not defined: -"); ok {
			name = strings.TrimPrefix(name, "-")
			msg = name + ": unknown flag (see " + fs.Name() + " --help)"
			if kind != "" {
				if _, perr := query.ParseRequest(kind, map[string]string{name: ""}); perr != nil && strings.HasPrefix(perr.Error(), name+": unknown parameter") {
					msg = perr.Error()
				}
			}
		}
		fmt.Fprintf(stderr, "%s: %s\n", fs.Name(), msg)
		return cli.ExitUsage, true
	case fs.NArg() > 0:
		fmt.Fprintf(stderr, "%s: unexpected argument %q (flags start with --)\n", fs.Name(), fs.Arg(0))
		return cli.ExitUsage, true
	}
	return 0, false
}

// commandUsage prints one command's flags and examples.
func commandUsage(fs *flag.FlagSet, cmd, help string) {
	w := fs.Output()
	fmt.Fprintf(w, "%s: %s\n\nUsage: query %s (--data DIR | --nats URL) [flags]\n\nFlags:\n", fs.Name(), help, cmd)
	fs.PrintDefaults()
	fmt.Fprint(w, "\nExamples:\n")
	for _, e := range examples[cmd] {
		fmt.Fprintf(w, "  %s\n", e)
	}
}

// usageError marks a source error that is the caller's (exit 2).
type usageError struct{ error }

// open opens the querier: on a stopped worker's directory, or on every
// running worker, with the workers' announced configuration unless
// --config is given (it says on stderr which one it used).
func (s *source) open(stderr io.Writer) (*query.Querier, func(), error) {
	cfg := config.Default()
	if s.config != "" {
		var err error
		if cfg, err = config.Load(s.config); err != nil {
			return nil, nil, usageError{err}
		}
	}
	if s.data != "" {
		if _, err := os.Stat(s.data); err != nil {
			return nil, nil, fmt.Errorf("data directory: %w", err)
		}
		if _, err := os.Stat(filepath.Join(s.data, "MANIFEST")); err != nil {
			return nil, nil, fmt.Errorf("%s is not a touchledger data directory (no store in it; run ingest first)", s.data)
		}
		st, err := state.Open(context.Background(), pipeline.StoreOptions(s.data, cfg))
		if err != nil {
			return nil, nil, err
		}
		q, err := query.NewQuerier(st, query.ParamsFrom(cfg))
		if err != nil {
			st.Close()
			return nil, nil, err
		}
		return q, func() { st.Close() }, nil
	}
	nc, err := s.connect()
	if err != nil {
		return nil, nil, err
	}
	o := remote.Options{Prefix: s.prefix, Partitions: s.partitions, Timeout: s.timeout}
	if s.config != "" {
		o.Resolutions = pipeline.StoreOptions("", cfg).Resolutions
	}
	src, err := remote.NewSource(nc, o)
	if err != nil {
		nc.Close()
		return nil, nil, err
	}
	params := query.ParamsFrom(cfg)
	if s.config != "" {
		fmt.Fprintf(stderr, "query: configuration from %s (not the workers' own)\n", s.config)
	} else if params, err = src.Config(); err != nil {
		nc.Close()
		return nil, nil, err
	} else {
		fmt.Fprintf(stderr, "query: configuration announced by the workers\n")
	}
	missing := src.Missing()
	q, err := query.NewQuerierFrom(src, src.Resolutions(), params)
	if errors.Is(err, query.ErrNoData) {
		err = errors.New("no data: the workers have committed no events yet")
		if missing != nil {
			err = fmt.Errorf("no data: the workers that answered have committed no events yet (%s)", strings.TrimPrefix(query.PartialWarning(missing), "partial answer: "))
		}
	}
	if err != nil {
		nc.Close()
		return nil, nil, err
	}
	return q, nc.Close, nil
}

// connect connects to NATS with the shared connection flags.
func (s *source) connect() (*nats.Conn, error) {
	o, err := s.nats.Options("touchledger query")
	if err == nil {
		err = o.Validate()
	}
	if err != nil {
		return nil, usageError{err}
	}
	return stream.Connect(o, nil)
}

// runForget erases a person: in a stopped worker's directory, or on every
// running worker.
func runForget(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("query forget", flag.ContinueOnError)
	fs.SetOutput(stderr)
	src := addSource(fs, forgetTimeout)
	format := fs.String("format", "table", "output `format`: table or json")
	user := fs.String("user", "", "the person's user `id` as sent (pseudonymised like input when a key is configured)")
	version := fs.Bool("version", false, "print the version and exit")
	fs.Usage = func() {
		commandUsage(fs, "forget", "erase a person: their stored session, journey and de-duplication state (aggregate counters hold no identifiers and stay); with --nats every running worker erases them and the owner of their partition purges their messages from the stream")
	}
	if code, done := parse(fs, "", args, stdout, stderr); done {
		return code
	}
	if *version {
		fmt.Fprintln(stdout, cli.Version("query"))
		return cli.ExitOK
	}
	fail := func(code int, err error) int {
		fmt.Fprintf(stderr, "query forget: %v\n", err)
		return code
	}
	f, err := query.ParseFormat(*format)
	if err != nil || f == query.CSV {
		return fail(cli.ExitUsage, fmt.Errorf("--format: use table or json, not %q", *format))
	}
	if err := src.check(); err != nil {
		return fail(cli.ExitUsage, err)
	}
	if *user == "" {
		return fail(cli.ExitUsage, errors.New("--user ID is required"))
	}
	cfg := config.Default()
	if src.config != "" {
		if cfg, err = config.Load(src.config); err != nil {
			return fail(cli.ExitUsage, err)
		}
	}
	if src.data != "" {
		return forget(src.data, *user, cfg, f, stdout, fail)
	}
	nc, err := src.connect()
	if err != nil {
		var use usageError
		if errors.As(err, &use) {
			return fail(cli.ExitUsage, err)
		}
		return fail(cli.ExitFailure, err)
	}
	defer nc.Close()
	return forgetLive(nc, src.prefix, src.partitions, src.timeout, *user, f, stdout, stderr, fail)
}

// forget erases a person from a stopped worker's data directory.
func forget(dir, user string, cfg config.Config, f query.Format, stdout io.Writer, fail func(int, error) int) int {
	if _, err := os.Stat(filepath.Join(dir, "MANIFEST")); err != nil {
		return fail(1, fmt.Errorf("%s is not a touchledger data directory", dir))
	}
	ps, err := pipeline.PseudonymsFrom(cfg)
	if err != nil {
		return fail(1, err)
	}
	st, err := state.Open(context.Background(), pipeline.StoreOptions(dir, cfg))
	if err != nil {
		return fail(1, err)
	}
	defer st.Close()
	pc := pipeline.FromConfig(cfg)
	pc.Pseudonyms = ps
	p, err := pipeline.New(st, pc, nil, nil)
	if err != nil {
		return fail(1, err)
	}
	rep, err := p.Forget(context.Background(), user)
	if cerr := p.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return fail(1, err)
	}
	if f == query.JSON {
		if err := query.WriteJSON(stdout, rep); err != nil {
			return fail(1, err)
		}
		return 0
	}
	what := "had no stored state"
	if rep.HadState {
		what = "session, journey and de-duplication state deleted"
	}
	fmt.Fprintf(stdout, "forgot %s: %s; events for them arriving before %s are dropped; aggregate counters, which hold no identifiers, are kept\n",
		rep.User, what, rep.DroppedUntil.Format(time.RFC3339))
	return 0
}
