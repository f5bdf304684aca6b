// Command query answers questions from a touchledger data directory.
//
//	query credit      --data DIR --model NAME [--order K] [window] [--by channel|campaign] [--format table|json|csv]
//	query shift       --data DIR --model NAME [--days 14]
//	query transitions --data DIR --level channel|action [--order K]
//	query paths       --data DIR --level action|channel [--top N]
//	query funnel      --data DIR
//	query alerts      --data DIR [--points]
//	query status      --data DIR
//
// See `query --help`.
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

	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/credit"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/state"
)

const usage = `query: read channel credit and path statistics from a touchledger data directory.

Usage:
  query credit      --data DIR --model NAME [--order K] [window] [--by channel|campaign] [--format F] [--chart]
  query shift       --data DIR --model NAME [--days N] [--format F] [--chart]
  query transitions --data DIR --level channel|action [--order K] [window] [--format F]
  query paths       --data DIR --level action|channel [--top N] [window] [--format F]
  query funnel      --data DIR [window] [--format F]
  query alerts      --data DIR [window] [--points] [--format F]
  query status      --data DIR [window] [--format F]

credit       conversions and value credited to each channel by a model
shift        each channel's credit per day and the change from the day before
transitions  how journeys move between channels (as the Markov model sees
             them), or how sessions move between actions, with row probabilities
paths        the most frequent whole session or journey paths, with conversion rates
funnel       sessions reaching each funnel step in order, and where they drop out
alerts       cart-abandonment spikes found by an EWMA control chart
status       what the data directory holds

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
	)
	switch cmd {
	case "credit", "shift", "status", "transitions", "paths", "funnel", "alerts":
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
	if *dataDir == "" {
		return fail(2, errors.New("--data is required"))
	}
	if (cmd == "credit" || cmd == "shift") && *model == "" {
		return fail(2, fmt.Errorf("--model is required (%s)", modelNames()))
	}
	grp, err := query.ParseBy(*by)
	if err != nil {
		return fail(2, err)
	}
	span, err := parseSpan(*from, *to, *last)
	if err != nil {
		return fail(2, err)
	}
	cfg := config.Default()
	if *configPath != "" {
		if cfg, err = config.Load(*configPath); err != nil {
			return fail(2, err)
		}
	}
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
	if (cmd == "transitions" || cmd == "paths") && *level == "" {
		return fail(2, errors.New("--level is required: channel or action"))
	}
	q, err := query.NewQuerier(st, pipeline.QueryParams(cfg))
	if err != nil {
		return fail(1, err)
	}
	defer q.Close()
	switch cmd {
	case "credit":
		a, err := q.Credit(*model, grp, *order, span)
		if err != nil {
			return fail(1, err)
		}
		err = query.WriteCredit(stdout, a, f, *chart)
		if err != nil {
			return fail(1, err)
		}
	case "shift":
		a, err := q.Shift(*model, *order, *days)
		if err != nil {
			return fail(1, err)
		}
		if err := query.WriteShift(stdout, a, f, *chart); err != nil {
			return fail(1, err)
		}
	case "transitions":
		a, err := q.Transitions(*level, *order, span)
		if err != nil {
			return fail(1, err)
		}
		if err := query.WriteTransitions(stdout, a, f); err != nil {
			return fail(1, err)
		}
	case "paths":
		a, err := q.Paths(*level, *top, span)
		if err != nil {
			return fail(1, err)
		}
		if err := query.WritePaths(stdout, a, f); err != nil {
			return fail(1, err)
		}
	case "funnel":
		a, err := q.Funnel(span)
		if err != nil {
			return fail(1, err)
		}
		if err := query.WriteFunnel(stdout, a, f); err != nil {
			return fail(1, err)
		}
	case "alerts":
		a, err := q.Alerts(span, *points)
		if err != nil {
			return fail(1, err)
		}
		if err := query.WriteAlerts(stdout, a, f); err != nil {
			return fail(1, err)
		}
	case "status":
		s, p, err := q.Status(span)
		if err != nil {
			return fail(1, err)
		}
		if err := query.WriteStatus(stdout, s, p, f); err != nil {
			return fail(1, err)
		}
	}
	return 0
}

// parseSpan reads the window flags.
func parseSpan(from, to, last string) (query.Span, error) {
	var s query.Span
	var err error
	if last != "" {
		d, err := config.ParseDuration(last)
		if err != nil {
			return s, fmt.Errorf("--last: %w", err)
		}
		s.Last = d
	}
	if from != "" {
		if s.From, err = parseTime(from); err != nil {
			return s, fmt.Errorf("--from: %w", err)
		}
	}
	if to != "" {
		if s.To, err = parseTime(to); err != nil {
			return s, fmt.Errorf("--to: %w", err)
		}
	}
	return s, nil
}

// parseTime accepts RFC 3339 or a date (00:00 UTC).
func parseTime(s string) (time.Time, error) {
	if t, err := time.Parse(time.RFC3339Nano, s); err == nil {
		return t.UTC(), nil
	}
	if t, err := time.Parse("2006-01-02", s); err == nil {
		return t, nil
	}
	return time.Time{}, fmt.Errorf("%q is neither an RFC 3339 time (2026-10-01T12:00:00Z) nor a date (2026-10-01)", s)
}
