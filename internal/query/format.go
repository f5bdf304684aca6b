package query

import (
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"

	"github.com/touchledger/touchledger/internal/pathstats"
)

// Format names an output format.
type Format string

const (
	Table Format = "table"
	JSON  Format = "json"
	CSV   Format = "csv"
)

// ParseFormat checks a --format value.
func ParseFormat(s string) (Format, error) {
	switch Format(s) {
	case "", Table:
		return Table, nil
	case JSON, CSV:
		return Format(s), nil
	}
	return "", fmt.Errorf("unknown format %q: use table, json or csv", s)
}

// WriteJSON writes v as indented JSON.
func WriteJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(v)
}

func f2(x float64) string  { return strconv.FormatFloat(x, 'f', 2, 64) }
func pct(x float64) string { return strconv.FormatFloat(100*x, 'f', 1, 64) + "%" }
func signed(x float64) string {
	if x > 0 {
		return "+" + f2(x)
	}
	return f2(x)
}

// Bar returns a text bar of width cells for a fraction in [0, 1].
func Bar(frac float64, width int) string {
	if frac < 0 {
		frac = 0
	}
	if frac > 1 {
		frac = 1
	}
	eighths := int(frac*float64(width)*8 + 0.5)
	full := eighths / 8
	var b strings.Builder
	b.WriteString(strings.Repeat("█", full))
	if r := eighths % 8; r > 0 {
		b.WriteRune([]rune("▏▎▍▌▋▊▉")[r-1])
	}
	return b.String()
}

// WriteCredit writes a credit answer. chart adds a bar per row (table only).
func WriteCredit(w io.Writer, a CreditAnswer, f Format, chart bool) error {
	if err := writePartial(w, a.MissingPartitions, f); err != nil {
		return err
	}
	switch f {
	case JSON:
		return WriteJSON(w, a)
	case CSV:
		cw := csv.NewWriter(w)
		head := []string{"model", "order", "from", "to", "channel"}
		if a.By == ByCampaign {
			head = append(head, "campaign")
		}
		head = append(head, "conversions", "value", "share")
		if err := cw.Write(head); err != nil {
			return err
		}
		for _, c := range a.Channels {
			row := []string{a.Model, orderText(a.Order), FormatTime(a.From), FormatTime(a.To), c.Channel}
			if a.By == ByCampaign {
				row = append(row, deref(c.Campaign))
			}
			row = append(row, strconv.FormatFloat(c.Conversions, 'f', -1, 64),
				strconv.FormatFloat(c.Value, 'f', -1, 64), strconv.FormatFloat(c.Share, 'f', -1, 64))
			if err := cw.Write(row); err != nil {
				return err
			}
		}
		cw.Flush()
		return cw.Error()
	}
	fmt.Fprintf(w, "credit by %s · model %s · %s", a.By, ModelLabel(a.Model, a.Order), a.Coverage)
	fmt.Fprintf(w, "\n%d conversions, value %s\n\n", a.Conversions, f2(a.Value))
	for _, n := range a.Notes {
		fmt.Fprintf(w, "note: %s\n", n)
	}
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	head := "CHANNEL\t"
	if a.By == ByCampaign {
		head += "CAMPAIGN\t"
	}
	head += "CONVERSIONS\tVALUE\tSHARE\t"
	if a.Channels != nil && len(a.Channels) > 0 && a.Channels[0].Journeys != nil {
		head += "JOURNEYS\t"
	}
	if chart {
		head += "\t"
	}
	fmt.Fprintln(tw, head)
	var top float64
	for _, c := range a.Channels {
		if c.Share > top {
			top = c.Share
		}
	}
	for _, c := range a.Channels {
		row := c.Channel + "\t"
		if a.By == ByCampaign {
			row += deref(c.Campaign) + "\t"
		}
		row += f2(c.Conversions) + "\t" + f2(c.Value) + "\t" + pct(c.Share) + "\t"
		if c.Journeys != nil {
			row += strconv.FormatInt(*c.Journeys, 10) + "\t"
		}
		if chart {
			frac := 0.0
			if top > 0 {
				frac = c.Share / top
			}
			row += " " + Bar(frac, 30) + "\t"
		}
		fmt.Fprintln(tw, row)
	}
	if len(a.Channels) == 0 {
		fmt.Fprintln(tw, "(no conversions in this window)\t")
	}
	return tw.Flush()
}

// String writes the span for people: "2026-10-01T00:00:00Z to
// 2026-10-08T00:00:00Z", followed by why it was rounded when it was.
func (c Coverage) String() string {
	s := FormatTime(c.From) + " to " + FormatTime(c.To)
	if c.Rounded {
		s += " (rounded: " + c.Rounding + ")"
	}
	return s
}

// optPct is an optional share for tables: "-" when unknown (nil).
func optPct(x *float64) string {
	if x == nil {
		return "-"
	}
	return pct(*x)
}

// orderText is a Markov order for CSV: empty for the other models.
func orderText(order int) string {
	if order == 0 {
		return ""
	}
	return strconv.Itoa(order)
}

// floatText is an optional number for CSV: empty when unknown (nil).
func floatText(x *float64) string {
	if x == nil {
		return ""
	}
	return strconv.FormatFloat(*x, 'f', -1, 64)
}

func deref(s *string) string {
	if s == nil {
		return ""
	}
	return *s
}

// WriteShift writes a shift answer.
func WriteShift(w io.Writer, a ShiftAnswer, f Format, chart bool) error {
	if err := writePartial(w, a.MissingPartitions, f); err != nil {
		return err
	}
	switch f {
	case JSON:
		return WriteJSON(w, a)
	case CSV:
		cw := csv.NewWriter(w)
		if err := cw.Write([]string{"model", "order", "day", "channel", "conversions", "value", "share", "change", "share_change"}); err != nil {
			return err
		}
		for _, d := range a.Days {
			for _, c := range d.Channels {
				if err := cw.Write([]string{a.Model, orderText(a.Order), d.Day, c.Channel,
					strconv.FormatFloat(c.Conversions, 'f', -1, 64), strconv.FormatFloat(c.Value, 'f', -1, 64),
					strconv.FormatFloat(c.Share, 'f', -1, 64), floatText(c.Change),
					floatText(c.ShareChange)}); err != nil {
					return err
				}
			}
		}
		cw.Flush()
		return cw.Error()
	}
	fmt.Fprintf(w, "credited conversions per day · model %s · change against the day before\n\n", ModelLabel(a.Model, a.Order))
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	head := "DAY\tTOTAL\t"
	for _, c := range a.Channels {
		head += c + "\t"
	}
	fmt.Fprintln(tw, head)
	for _, d := range a.Days {
		row := d.Day + "\t" + strconv.FormatInt(d.Conversions, 10) + "\t"
		for _, c := range d.Channels {
			if c.Change == nil {
				row += f2(c.Conversions) + " (-)\t"
			} else {
				row += f2(c.Conversions) + " (" + signed(*c.Change) + ")\t"
			}
		}
		fmt.Fprintln(tw, row)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	if chart && len(a.Days) > 0 {
		fmt.Fprintf(w, "\nshare of credit per channel, one bar per day (oldest first)\n")
		for _, name := range a.Channels {
			var line strings.Builder
			for _, d := range a.Days {
				for _, c := range d.Channels {
					if c.Channel == name {
						line.WriteRune(spark(c.Share))
					}
				}
			}
			fmt.Fprintf(w, "%-20s %s\n", name, line.String())
		}
	}
	return nil
}

// spark maps a share in [0, 1] to one of eight block heights.
func spark(x float64) rune {
	blocks := []rune(" ▁▂▃▄▅▆▇█")
	i := int(x*8 + 0.5)
	if i < 0 {
		i = 0
	}
	if i > 8 {
		i = 8
	}
	return blocks[i]
}

// WriteStatus writes a status answer.
func WriteStatus(w io.Writer, s StatusAnswer, f Format) error {
	if err := writePartial(w, s.MissingPartitions, f); err != nil {
		return err
	}
	latest := s.Latest.Format(time.RFC3339Nano)
	switch f {
	case JSON:
		return WriteJSON(w, s)
	case CSV:
		return csvOut(w, [][]string{{"from", "to", "rounded", "latest_event", "conversions", "value", "sessions", "actions", "touches"},
			{FormatTime(s.From), FormatTime(s.To), strconv.FormatBool(s.Rounded), latest, fi(s.Conversions), ff(s.Value), fi(s.Sessions), fi(s.Actions), fi(s.Touches)}})
	}
	_, err := fmt.Fprintf(w, "window %s\nlatest event %s\nconversions %d, value %s\nsessions %d, actions %d, touches %d\n",
		s.Coverage, latest, s.Conversions, f2(s.Value), s.Sessions, s.Actions, s.Touches)
	return err
}

func csvOut(w io.Writer, rows [][]string) error {
	cw := csv.NewWriter(w)
	if err := cw.WriteAll(rows); err != nil {
		return err
	}
	return cw.Error()
}

func ff(x float64) string { return strconv.FormatFloat(x, 'f', -1, 64) }
func fi(x int64) string   { return strconv.FormatInt(x, 10) }

// WriteTransitions writes a transitions answer.
func WriteTransitions(w io.Writer, a TransitionsAnswer, f Format) error {
	if err := writePartial(w, a.MissingPartitions, f); err != nil {
		return err
	}
	switch f {
	case JSON:
		return WriteJSON(w, a)
	case CSV:
		rows := [][]string{{"level", "order", "from_time", "to_time", "from", "to", "count", "probability"}}
		for _, t := range a.Transitions {
			rows = append(rows, []string{a.Level, strconv.Itoa(a.Order), FormatTime(a.From), FormatTime(a.To), t.From, t.To, fi(t.Count), ff(t.Probability)})
		}
		return csvOut(w, rows)
	}
	title := "action transitions within sessions"
	if a.Level == "channel" {
		title = fmt.Sprintf("channel transitions of journeys (order %d)", a.Order)
	}
	fmt.Fprintf(w, "%s · %s\n\n", title, a.Coverage)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "FROM\tTO\tCOUNT\tPROBABILITY\t")
	for _, t := range a.Transitions {
		fmt.Fprintf(tw, "%s\t%s\t%d\t%s\t\n", t.From, t.To, t.Count, f4(t.Probability))
	}
	if len(a.Transitions) == 0 {
		fmt.Fprintln(tw, "(nothing in this window)\t")
	}
	return tw.Flush()
}

func f4(x float64) string { return strconv.FormatFloat(x, 'f', 4, 64) }

// WritePaths writes a paths answer.
func WritePaths(w io.Writer, a PathsAnswer, f Format) error {
	if err := writePartial(w, a.MissingPartitions, f); err != nil {
		return err
	}
	switch f {
	case JSON:
		return WriteJSON(w, a)
	case CSV:
		rows := [][]string{{"level", "from", "to", "path", "end", "count", "share", "path_count", "conversions", "conversion_rate"}}
		for _, p := range a.Paths {
			rows = append(rows, []string{a.Level, FormatTime(a.From), FormatTime(a.To), strings.Join(p.Path, pathstats.PathSeparator), p.End,
				fi(p.Count), ff(p.Share), fi(p.PathCount), fi(p.Conversions), ff(p.ConversionRate)})
		}
		return csvOut(w, rows)
	}
	what := "sessions (actions, repeats collapsed)"
	if a.Level == "channel" {
		what = "journeys (channels, ending in @converted or @lost)"
	}
	fmt.Fprintf(w, "most frequent paths of %s · %s · %d in all\n", what, a.Coverage, a.Total)
	if a.Level == "channel" {
		fmt.Fprintln(w, "conversion rate: of all journeys on the path before its end state")
	}
	fmt.Fprintln(w)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "COUNT\tSHARE\tCONVERSION RATE\tPATH\t")
	for _, p := range a.Paths {
		fmt.Fprintf(tw, "%d\t%s\t%s\t%s\t\n", p.Count, pct(p.Share), pct(p.ConversionRate), p.Key())
	}
	return tw.Flush()
}

// WriteFunnel writes a funnel answer.
func WriteFunnel(w io.Writer, a FunnelAnswer, f Format) error {
	if err := writePartial(w, a.MissingPartitions, f); err != nil {
		return err
	}
	switch f {
	case JSON:
		return WriteJSON(w, a)
	case CSV:
		rows := [][]string{{"from", "to", "step", "sessions", "abandonment"}}
		for _, s := range a.Steps {
			rows = append(rows, []string{FormatTime(a.From), FormatTime(a.To), s.Step, fi(s.Sessions), floatText(s.Abandonment)})
		}
		return csvOut(w, rows)
	}
	fmt.Fprintf(w, "in-order funnel of %d sessions ending %s\n\n", a.Sessions, a.Coverage)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "STEP\tSESSIONS\tDROP TO NEXT\t\t")
	var first int64
	if len(a.Steps) > 0 {
		first = a.Steps[0].Sessions
	}
	for _, s := range a.Steps {
		drop := optPct(s.Abandonment)
		frac := 0.0
		if first > 0 {
			frac = float64(s.Sessions) / float64(first)
		}
		fmt.Fprintf(tw, "%s\t%d\t%s\t%s\t\n", s.Step, s.Sessions, drop, Bar(frac, 30))
	}
	tw.Flush()
	_, err := fmt.Fprintf(w, "\nbasket abandonment %s of %d basket sessions · first to last step %s\n",
		optPct(a.BasketAbandonment), a.BasketSessions, optPct(a.OverallConversion))
	return err
}

// WriteAlerts writes an alerts answer.
func WriteAlerts(w io.Writer, a AlertsAnswer, f Format) error {
	if err := writePartial(w, a.MissingPartitions, f); err != nil {
		return err
	}
	switch f {
	case JSON:
		return WriteJSON(w, a)
	case CSV:
		rows := [][]string{{"name", "opened", "closed", "open", "rate", "baseline", "limit", "peak"}}
		for _, x := range a.Alerts {
			rows = append(rows, []string{x.Name, FormatTime(x.Opened), closedText(x.Closed), strconv.FormatBool(x.Open), ff(x.Rate), ff(x.Baseline), ff(x.Limit), ff(x.Peak)})
		}
		return csvOut(w, rows)
	}
	fmt.Fprintf(w, "%s alerts · %s intervals · %s\n\n", strings.ReplaceAll(a.Name, "_", " "), a.Interval, a.Coverage)
	if len(a.Alerts) == 0 {
		fmt.Fprintln(w, "no alerts in this window")
	} else {
		tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
		fmt.Fprintln(tw, "OPENED\tCLOSED\tRATE\tBASELINE\tLIMIT\tPEAK\t")
		for _, x := range a.Alerts {
			closed := closedText(x.Closed)
			if x.Open {
				closed = "(open)"
			}
			fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t\n", FormatTime(x.Opened), closed, pct(x.Rate), pct(x.Baseline), pct(x.Limit), pct(x.Peak))
		}
		tw.Flush()
	}
	if len(a.Points) > 0 {
		fmt.Fprintln(w)
		tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
		fmt.Fprintln(tw, "INTERVAL\tSESSIONS AT STEP\tABANDONED\tRATE\tEWMA\tLIMIT\t\t")
		for _, p := range a.Points {
			mark := ""
			if p.Alerting {
				mark = "ALERT"
			}
			stat, lim := pct(p.Statistic), pct(p.Limit)
			if !p.Evaluated {
				stat, lim, mark = "-", "-", "(too few sessions)"
			}
			fmt.Fprintf(tw, "%s\t%d\t%d\t%s\t%s\t%s\t%s\t\n", FormatTime(p.Start), p.Sessions, p.Abandons, pct(p.Rate), stat, lim, mark)
		}
		tw.Flush()
	}
	return nil
}

// closedText is an alert's closing time, empty while open.
func closedText(t time.Time) string {
	if t.IsZero() {
		return ""
	}
	return FormatTime(t)
}
