// Command demo writes the simulated Lantern & Moss shop as JSON lines.
//
// It only parses flags and wires demo/shop; see demo/README.md for the world.
package main

import (
	"bufio"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"strings"
	"time"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/cli"
)

const usage = `demo writes an invented online shop's events as JSON lines, one event per line,
sorted by time: marketing touches and shop actions in touchledger's event format.

The world is seeded: the same flags always give the same bytes. Half-way through
the period budget moves from search_ads to social_ads; on one afternoon checkout
breaks for 40 minutes. Every rate in it is invented: a sandbox, not proof.

Usage:
  demo [flags]

Examples:
  demo --out events.jsonl
  demo --visitors 200000 --out bench.jsonl        # about 1 M events
  demo --truth truth.json --out events.jsonl      # also the true effect per channel

Flags:
`

type options struct {
	out, truth, start, off string
	seed                   int64
	days, visitors         int
	shiftDay, incidentDay  int
}

func main() {
	if err := run(os.Args[1:], os.Stdout, os.Stderr); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return
		}
		fmt.Fprintln(os.Stderr, "demo:", err)
		os.Exit(2)
	}
}

func run(args []string, stdout, stderr io.Writer) error {
	def := shop.DefaultConfig()
	var o options
	fs := flag.NewFlagSet("demo", flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.Usage = func() {
		fmt.Fprint(stderr, usage)
		fs.PrintDefaults()
	}
	fs.StringVar(&o.out, "out", "", "write the events to `FILE` (default: standard output)")
	fs.Int64Var(&o.seed, "seed", def.Seed, "random seed; the same seed gives the same events")
	fs.IntVar(&o.days, "days", def.Days, "length of the period in days")
	fs.IntVar(&o.visitors, "visitors", def.Visitors, "people who first visit in the period (about 5 events each)")
	fs.StringVar(&o.start, "start", def.Start.Format(time.DateOnly), "first day, `DATE` (2026-10-01) or an RFC 3339 time; UTC")
	fs.IntVar(&o.shiftDay, "shift-day", -1, "day (0-based) the budget moves from search_ads to social_ads; -1 means days/2")
	fs.IntVar(&o.incidentDay, "incident-day", -1, "day (0-based) of the 40-minute checkout outage at 15:00 UTC; -1 means days*5/7")
	fs.StringVar(&o.off, "off", "", "comma-separated `CHANNELS` to switch off (what-if runs); one of "+strings.Join(shop.Channels(), ", "))
	fs.StringVar(&o.truth, "truth", "", "also write the true incremental conversions per channel as JSON to `FILE`")
	version := cli.AddVersion(fs)
	if err := fs.Parse(args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		return fmt.Errorf("unexpected argument %q (see --help)", fs.Arg(0))
	}
	if *version {
		fmt.Fprintln(stdout, cli.Version("demo"))
		return nil
	}
	c, err := o.config(def)
	if err != nil {
		return err
	}

	var w io.Writer = stdout
	name := "standard output"
	var file *os.File
	if o.out != "" {
		if file, err = os.Create(o.out); err != nil {
			return fmt.Errorf("create output: %w", err)
		}
		defer file.Close()
		w, name = file, o.out
	}
	bw := bufio.NewWriterSize(w, 1<<20)
	st, err := shop.Generate(bw, c)
	if err != nil {
		return fmt.Errorf("generate: %w", err)
	}
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("write %s: %w", name, err)
	}
	if file != nil {
		if err := file.Close(); err != nil {
			return fmt.Errorf("close %s: %w", name, err)
		}
	}
	if o.truth != "" {
		if err := writeTruth(o.truth, c); err != nil {
			return err
		}
	}
	incident := "none"
	if c.IncidentLength > 0 {
		incident = fmt.Sprintf("day %d %s+%s", c.IncidentDay, fmtClock(c.IncidentStart), c.IncidentLength)
	}
	fmt.Fprintf(stderr, "demo: %d events (%d touches, %d actions), %d conversions worth %.2f %s, %d visitors over %d days from %s, seed %d, budget shift day %d, checkout outage %s -> %s\n",
		st.Events, st.Touches, st.Actions, st.Conversions, st.Value, shop.Currency, c.Visitors, c.Days,
		c.Start.Format(time.DateOnly), c.Seed, c.ShiftDay, incident, name)
	return nil
}

func (o options) config(def shop.Config) (shop.Config, error) {
	c := def
	c.Seed, c.Days, c.Visitors = o.seed, o.days, o.visitors
	start, err := parseStart(o.start)
	if err != nil {
		return c, err
	}
	c.Start = start
	c.ShiftDay = o.shiftDay
	if c.ShiftDay < 0 {
		c.ShiftDay = c.Days / 2
	}
	c.IncidentDay = o.incidentDay
	if c.IncidentDay < 0 {
		c.IncidentDay = c.Days * 5 / 7
	}
	if o.off != "" {
		c.Off = make(map[string]bool)
		for _, name := range strings.Split(o.off, ",") {
			c.Off[strings.TrimSpace(name)] = true
		}
	}
	if err := c.Validate(); err != nil {
		return c, err
	}
	return c, nil
}

func parseStart(s string) (time.Time, error) {
	if t, err := time.Parse(time.DateOnly, s); err == nil {
		return t, nil
	}
	t, err := time.Parse(time.RFC3339, s)
	if err != nil {
		return time.Time{}, fmt.Errorf("start %q is neither a date (2026-10-01) nor RFC 3339", s)
	}
	return t.UTC(), nil
}

func fmtClock(d time.Duration) string {
	return fmt.Sprintf("%02d:%02d", int(d.Hours()), int(d.Minutes())%60)
}

// truthFile is the shape written by --truth.
type truthFile struct {
	Seed              int64              `json:"seed"`
	Visitors          int                `json:"visitors"`
	Days              int                `json:"days"`
	IncrementalTotal  float64            `json:"incremental_total"`
	IncrementalByChan map[string]float64 `json:"channels"`
}

func writeTruth(path string, c shop.Config) error {
	per, total, err := shop.TrueIncremental(c)
	if err != nil {
		return fmt.Errorf("true incremental: %w", err)
	}
	b, err := json.MarshalIndent(truthFile{Seed: c.Seed, Visitors: c.Visitors, Days: c.Days,
		IncrementalTotal: total, IncrementalByChan: per}, "", "  ")
	if err != nil {
		return fmt.Errorf("encode truth: %w", err)
	}
	if err := os.WriteFile(path, append(b, '\n'), 0o644); err != nil {
		return fmt.Errorf("write truth: %w", err)
	}
	return nil
}
