package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"os"
	"time"

	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/state"
)

const clockUsage = `ingest clock: show, and with --repair set, the event clock of a data directory.

Usage:
  ingest clock --data DIR [--config FILE]
  ingest clock --data DIR --set-latest TIME --repair

The clock is the largest event time seen and the watermark floor; the
watermark is the largest time seen minus the lateness, and events older
than it are rejected as late. A directory written before the clock guard
(clock.max_jump, clock.max_future) may hold a time far in the future
from one bad event: every later event is then late and query windows end
there. --set-latest TIME (RFC 3339) with --repair sets the largest time
seen to TIME and lowers the floor to it if it is higher. Buckets a poisoned
clock pruned as expired are not brought back: restore those from a backup.
The worker must be stopped (the directory is locked while it runs).

Options:
`

func runClock(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("ingest clock", flag.ContinueOnError)
	fs.SetOutput(stderr)
	dir := fs.String("data", "", "data `directory`")
	cfgPath := fs.String("config", "", "configuration `file` the directory was written with")
	setLatest := fs.String("set-latest", "", "new largest event `time` seen (RFC 3339); needs --repair")
	repair := fs.Bool("repair", false, "write the clock given by --set-latest")
	fs.Usage = func() { fmt.Fprint(stderr, clockUsage); fs.PrintDefaults() }
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		return 2
	}
	if *dir == "" || fs.NArg() > 0 {
		fmt.Fprintln(stderr, "ingest clock: --data DIR is required (see --help)")
		return 2
	}
	if (*setLatest != "") != *repair {
		fmt.Fprintln(stderr, "ingest clock: --set-latest and --repair go together: --repair writes the time --set-latest gives")
		return 2
	}
	var newLatest time.Time
	if *setLatest != "" {
		var err error
		if newLatest, err = time.Parse(time.RFC3339Nano, *setLatest); err != nil {
			fmt.Fprintf(stderr, "ingest clock: --set-latest: %v\n", err)
			return 2
		}
	}
	cfg, err := loadConfig(*cfgPath)
	if err != nil {
		fmt.Fprintf(stderr, "ingest clock: %v\n", err)
		return 2
	}
	if err := refuseMissingDir(*dir); err != nil {
		fmt.Fprintf(stderr, "ingest clock: %v\n", err)
		return 1
	}
	ctx := context.Background()
	st, err := state.Open(ctx, pipeline.StoreOptions(*dir, cfg))
	if err != nil {
		fmt.Fprintf(stderr, "ingest clock: %v\n", err)
		return 1
	}
	defer st.Close()
	r := st.NewReader()
	maxSeen, floor, ok, err := r.Watermark()
	r.Discard()
	if err != nil {
		fmt.Fprintf(stderr, "ingest clock: %v\n", err)
		return 1
	}
	show := func(what string, maxSeen, floor int64) {
		wm := floor
		if maxSeen != math.MinInt64 && maxSeen-int64(cfg.Lateness) > wm {
			wm = maxSeen - int64(cfg.Lateness)
		}
		fmt.Fprintf(stdout, "%s: latest event %s, floor %s, watermark %s (lateness %s)\n",
			what, clockTime(maxSeen), clockTime(floor), clockTime(wm), cfg.Lateness)
	}
	if !ok {
		fmt.Fprintf(stdout, "clock: nothing committed in %s yet\n", *dir)
		return 0
	}
	show("clock", maxSeen, floor)
	if now := time.Now(); maxSeen != math.MinInt64 && maxSeen > now.Add(cfg.Clock.MaxFuture.D()).UnixNano() {
		fmt.Fprintf(stdout, "warning: the latest event time is ahead of the wall clock (%s): repair with --set-latest TIME --repair\n", now.UTC().Format(time.RFC3339))
	}
	if !*repair {
		return 0
	}
	ns := newLatest.UnixNano()
	nf := min(floor, ns)
	if _, err := st.Commit(ctx, &state.Commit{Meta: state.Meta{Watermark: &state.Watermark{MaxSeen: ns, Floor: nf}}}); err != nil {
		fmt.Fprintf(stderr, "ingest clock: repair: %v\n", err)
		return 1
	}
	show("repaired", ns, nf)
	return 0
}

func clockTime(ns int64) string {
	if ns == math.MinInt64 {
		return "none"
	}
	return time.Unix(0, ns).UTC().Format(time.RFC3339Nano)
}

// refuseMissingDir fails for a data directory that does not exist, so a
// mistyped path is not created empty by a command that only reads or
// repairs.
func refuseMissingDir(dir string) error {
	st, err := os.Stat(dir)
	if err != nil {
		return fmt.Errorf("data directory: %w", err)
	}
	if !st.IsDir() {
		return fmt.Errorf("data directory %s is not a directory", dir)
	}
	return nil
}
