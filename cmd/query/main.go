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
//
// See `query --help`.
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"net/url"
	"os"
	"path/filepath"
	"strings"
	"time"

	"github.com/nats-io/nats.go"

	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/credit"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/remote"
	"github.com/touchledger/touchledger/internal/state"
	"github.com/touchledger/touchledger/internal/web"
)

const usage = `query: read channel credit and path statistics from a touchledger data
directory, or from every live worker over NATS.

Usage:
  query credit      SOURCE --model NAME [--order K] [window] [--by channel|campaign] [--format F] [--chart]
  query shift       SOURCE --model NAME [--days N] [--format F] [--chart]
  query transitions SOURCE --level channel|action [--order K] [window] [--format F]
  query paths       SOURCE --level action|channel [--top N] [window] [--format F]
  query funnel      SOURCE [window] [--format F]
  query alerts      SOURCE [window] [--points] [--format F]
  query status      SOURCE [window] [--format F]
  query forget      SOURCE --user ID [--format F]

SOURCE is exactly one of:
  --data DIR         the data directory of a stopped worker
  --nats URL         ask every running worker (comma-separated URLs for a cluster);
                     options --nats-creds FILE, --nats-user U --nats-password P,
                     --nats-token T, --timeout 2s, --partitions 16, --prefix tl.
                     Workers' tables are added, then the models are computed;
                     partitions whose worker did not answer within --timeout
                     are named: "partial answer: partitions 8-15 did not answer".

credit       conversions and value credited to each channel by a model
shift        each channel's credit per day and the change from the day before
transitions  how journeys move between channels (as the Markov model sees
             them), or how sessions move between actions, with row probabilities
paths        the most frequent whole session or journey paths, with conversion rates
funnel       sessions reaching each funnel step in order, and where they drop out
alerts       abandonment spikes after the watched funnel step (EWMA control chart)
status       what the data directory holds
scorecard    each model's credit next to a simulated world's true incremental
             conversions (demo --truth FILE), with the distance between them
forget       erase a person: their stored session, journey and de-duplication
             state (aggregate counters hold no identifiers and stay). With
             --data, in a stopped worker's directory; with --nats, every
             running worker erases them (tl.admin.forget, which needs the
             admin's credentials in deploy/), the owner of their partition
             also purges their messages from the stream, and each worker's
             answer is shown; --timeout defaults to 10s here

Window (over conversion time, [from, to)):
  --last 7d          the 7 days up to the latest event seen (default 30d)
  --from T --to T    RFC 3339 times or dates (2026-10-01 = 00:00 UTC)
The answer names the window it covers; it is widened to bucket edges when
the data held at that age is coarser than the window's edges.

Models: %s

Run "query COMMAND --help" for the options of a command.
`

func main() {
	os.Exit(run(os.Args[1:], os.Stdout, os.Stderr))
}

func modelNames() string {
	var names []string
	for _, m := range credit.RuleModels {
		names = append(names, m.String())
	}
	names = append(names, query.ModelMarkov, query.ModelShapley)
	return strings.Join(names, ", ")
}

func run(args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 || args[0] == "-h" || args[0] == "--help" || args[0] == "help" {
		fmt.Fprintf(stderr, usage, modelNames())
		if len(args) == 0 {
			return 2
		}
		return 0
	}
	cmd, args := args[0], args[1:]
	fs := flag.NewFlagSet("query "+cmd, flag.ContinueOnError)
	fs.SetOutput(stderr)
	var (
		dataDir    = fs.String("data", "", "data `directory` of a stopped worker")
		configPath = fs.String("config", "", "YAML configuration `file` the data directory was written with")
		format     = fs.String("format", "table", "output `format`: table, json or csv")
		model      = fs.String("model", "", "attribution `model`: "+modelNames())
		by         = fs.String("by", "channel", "group credit by channel or campaign")
		from       = fs.String("from", "", "window start: RFC 3339 `time` or date")
		to         = fs.String("to", "", "window end (exclusive): RFC 3339 `time` or date")
		last       = fs.String("last", "", "window `length` ending at the latest event, e.g. 7d, 12h")
		days       = fs.Int("days", 14, "shift: number of `days` to show")
		chart      = fs.Bool("chart", false, "table format: add a text bar chart")
		order      = fs.Int("order", 1, "markov model and channel transitions: Markov `order` (1 up to markov_max_order)")
		level      = fs.String("level", "", "transitions and paths: `channel` (journeys) or action (sessions)")
		top        = fs.Int("top", 10, "paths: how many paths to show")
		points     = fs.Bool("points", false, "alerts: also show every interval of the chart")
		natsURL    = fs.String("nats", "", "NATS server `URL` (comma-separated for a cluster): ask the running workers")
		natsCreds  = fs.String("nats-creds", "", "NATS credentials `file`")
		natsUser   = fs.String("nats-user", "", "NATS `user` name (with --nats-password)")
		natsPass   = fs.String("nats-password", "", "NATS `password`")
		natsToken  = fs.String("nats-token", "", "NATS authentication `token`")
		timeout    = fs.Duration("timeout", remote.DefaultTimeout, "with --nats: how long to wait for workers and for each answer")
		partitions = fs.Int("partitions", remote.DefaultPartitions, "with --nats: number of partitions in all")
		prefix     = fs.String("prefix", remote.DefaultPrefix, "with --nats: subject `prefix` of the workers")
		truthPath  = fs.String("truth", "", "scorecard: the simulated world's truth `file` (demo --truth)")
		user       = fs.String("user", "", "forget: the person's user `id` as sent (pseudonymised like input when a key is configured)")
	)
	switch cmd {
	case "credit", "shift", "status", "transitions", "paths", "funnel", "alerts", "scorecard", "forget":
	default:
		fmt.Fprintf(stderr, "query: unknown command %q (see --help)\n", cmd)
		return 2
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		return 2
	}
	if fs.NArg() > 0 {
		fmt.Fprintf(stderr, "query: unexpected argument %q\n", fs.Arg(0))
		return 2
	}
	fail := func(code int, err error) int {
		fmt.Fprintf(stderr, "query %s: %v\n", cmd, err)
		return code
	}
	f, err := query.ParseFormat(*format)
	if err != nil {
		return fail(2, err)
	}
	switch {
	case *dataDir == "" && *natsURL == "":
		return fail(2, errors.New("--data DIR (a stopped worker's directory) or --nats URL (the running workers) is required"))
	case *dataDir != "" && *natsURL != "":
		return fail(2, errors.New("--data and --nats exclude each other: give one"))
	}
	if (cmd == "credit" || cmd == "shift") && *model == "" {
		return fail(2, fmt.Errorf("--model is required (%s)", modelNames()))
	}
	grp, err := query.ParseBy(*by)
	if err != nil {
		return fail(2, err)
	}
	span, err := web.ParseSpan(*from, *to, *last)
	if err != nil {
		return fail(2, fmt.Errorf("window (--from, --to, --last): %w", err))
	}
	cfg := config.Default()
	if *configPath != "" {
		if cfg, err = config.Load(*configPath); err != nil {
			return fail(2, err)
		}
	}
	if (cmd == "transitions" || cmd == "paths") && *level == "" {
		return fail(2, errors.New("--level is required: channel or action"))
	}
	if cmd == "scorecard" && *truthPath == "" {
		return fail(2, errors.New("--truth FILE is required (write it with: demo --truth FILE)"))
	}
	if cmd == "forget" {
		if *user == "" {
			return fail(2, errors.New("--user ID is required"))
		}
		if *natsURL != "" {
			wait := *timeout
			if !flagSet(fs, "timeout") {
				wait = forgetTimeout
			}
			if wait <= 0 {
				return fail(2, fmt.Errorf("--timeout must be positive, got %v", wait))
			}
			if *partitions < 1 {
				return fail(2, fmt.Errorf("--partitions must be at least 1, got %d", *partitions))
			}
			opts, err := natsOptions(*natsCreds, *natsUser, *natsPass, *natsToken, wait)
			if err != nil {
				return fail(2, err)
			}
			nc, err := nats.Connect(*natsURL, opts...)
			if err != nil {
				return fail(1, fmt.Errorf("connect to NATS at %s: %w", redact(*natsURL), err))
			}
			defer nc.Close()
			return forgetLive(nc, *prefix, *partitions, wait, *user, f, stdout, stderr, fail)
		}
		return forget(*dataDir, *user, cfg, f, stdout, fail)
	}
	var q *query.Querier
	var missing []int
	if *dataDir != "" {
		if _, err := os.Stat(*dataDir); err != nil {
			return fail(1, fmt.Errorf("data directory: %w", err))
		}
		if _, err := os.Stat(filepath.Join(*dataDir, "MANIFEST")); err != nil {
			return fail(1, fmt.Errorf("%s is not a touchledger data directory (no store in it; run ingest first)", *dataDir))
		}
		st, err := state.Open(context.Background(), pipeline.StoreOptions(*dataDir, cfg))
		if err != nil {
			return fail(1, err)
		}
		defer st.Close()
		if q, err = query.NewQuerier(st, pipeline.QueryParams(cfg)); err != nil {
			return fail(1, err)
		}
	} else {
		if *timeout <= 0 {
			return fail(2, fmt.Errorf("--timeout must be positive, got %v", *timeout))
		}
		if *partitions < 1 {
			return fail(2, fmt.Errorf("--partitions must be at least 1, got %d", *partitions))
		}
		opts, err := natsOptions(*natsCreds, *natsUser, *natsPass, *natsToken, *timeout)
		if err != nil {
			return fail(2, err)
		}
		nc, err := nats.Connect(*natsURL, opts...)
		if err != nil {
			return fail(1, fmt.Errorf("connect to NATS at %s: %w", redact(*natsURL), err))
		}
		defer nc.Close()
		res := pipeline.StoreOptions("", cfg).Resolutions
		src, err := remote.NewSource(nc, remote.Options{Prefix: *prefix, Partitions: *partitions, Timeout: *timeout, Resolutions: res})
		if err != nil {
			return fail(1, err)
		}
		missing = src.Missing()
		q, err = query.NewQuerierFrom(src, res, pipeline.QueryParams(cfg))
		if errors.Is(err, query.ErrNoData) {
			err = fmt.Errorf("no data: the workers that answered have committed no events yet (%s)", strings.TrimPrefix(query.PartialWarning(missing), "partial answer: "))
			if missing == nil {
				err = errors.New("no data: the workers have committed no events yet")
			}
		}
		if err != nil {
			return fail(1, err)
		}
	}
	defer q.Close()
	if w := query.PartialWarning(missing); w != "" && f == query.JSON {
		// JSON carries missing_partitions; say it to people too.
		fmt.Fprintf(stderr, "query %s: %s\n", cmd, w)
	}
	switch cmd {
	case "credit":
		a, err := q.Credit(*model, grp, *order, span)
		if err != nil {
			return fail(1, err)
		}
		a.MissingPartitions = missing
		err = query.WriteCredit(stdout, a, f, *chart)
		if err != nil {
			return fail(1, err)
		}
	case "shift":
		a, err := q.Shift(*model, *order, *days)
		if err != nil {
			return fail(1, err)
		}
		a.MissingPartitions = missing
		if err := query.WriteShift(stdout, a, f, *chart); err != nil {
			return fail(1, err)
		}
	case "transitions":
		a, err := q.Transitions(*level, *order, span)
		if err != nil {
			return fail(1, err)
		}
		a.MissingPartitions = missing
		if err := query.WriteTransitions(stdout, a, f); err != nil {
			return fail(1, err)
		}
	case "paths":
		a, err := q.Paths(*level, *top, span)
		if err != nil {
			return fail(1, err)
		}
		a.MissingPartitions = missing
		if err := query.WritePaths(stdout, a, f); err != nil {
			return fail(1, err)
		}
	case "funnel":
		a, err := q.Funnel(span)
		if err != nil {
			return fail(1, err)
		}
		a.MissingPartitions = missing
		if err := query.WriteFunnel(stdout, a, f); err != nil {
			return fail(1, err)
		}
	case "alerts":
		a, err := q.Alerts(span, *points)
		if err != nil {
			return fail(1, err)
		}
		a.MissingPartitions = missing
		if err := query.WriteAlerts(stdout, a, f); err != nil {
			return fail(1, err)
		}
	case "scorecard":
		truth, err := query.ReadTruth(*truthPath)
		if err != nil {
			return fail(1, err)
		}
		var answers []query.CreditAnswer
		for _, m := range strings.Split(modelNames(), ", ") {
			a, err := q.Credit(m, query.ByChannel, 0, span)
			if err != nil {
				return fail(1, fmt.Errorf("model %s: %w", m, err))
			}
			answers = append(answers, a)
		}
		sc := query.Scorecard(answers, truth)
		sc.MissingPartitions = missing
		if err := query.WriteScorecard(stdout, sc, f); err != nil {
			return fail(1, err)
		}
	case "status":
		s, p, err := q.Status(span)
		if err != nil {
			return fail(1, err)
		}
		s.MissingPartitions = missing
		if err := query.WriteStatus(stdout, s, p, f); err != nil {
			return fail(1, err)
		}
	}
	return 0
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

// natsOptions builds the connection options from the authentication flags.
func natsOptions(creds, user, password, token string, timeout time.Duration) ([]nats.Option, error) {
	opts := []nats.Option{nats.Name("touchledger query"), nats.Timeout(timeout), nats.MaxReconnects(0)}
	auth := 0
	if creds != "" {
		auth++
		opts = append(opts, nats.UserCredentials(creds))
	}
	if user != "" || password != "" {
		if user == "" || password == "" {
			return nil, errors.New("--nats-user and --nats-password go together")
		}
		auth++
		opts = append(opts, nats.UserInfo(user, password))
	}
	if token != "" {
		auth++
		opts = append(opts, nats.Token(token))
	}
	if auth > 1 {
		return nil, errors.New("give one way to authenticate: --nats-creds, --nats-user/--nats-password or --nats-token")
	}
	return opts, nil
}

// redact hides passwords in server URLs before they are printed.
func redact(urls string) string {
	parts := strings.Split(urls, ",")
	for i, p := range parts {
		if u, err := url.Parse(strings.TrimSpace(p)); err == nil && u.User != nil {
			parts[i] = u.Redacted()
		}
	}
	return strings.Join(parts, ",")
}
