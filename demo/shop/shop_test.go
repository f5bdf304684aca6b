package shop

import (
	"bufio"
	"bytes"
	"encoding/json"
	"maps"
	"math"
	"regexp"
	"slices"
	"testing"
	"time"
)

// testConfig is a small world for tests: one week, the shift on day 3, the
// outage on day 4 at 15:00 for 40 minutes.
func testConfig(visitors int) Config {
	c := DefaultConfig()
	c.Days, c.Visitors, c.ShiftDay, c.IncidentDay = 7, visitors, 3, 4
	return c
}

func generate(t testing.TB, c Config) ([]byte, Stats) {
	t.Helper()
	var buf bytes.Buffer
	st, err := Generate(&buf, c)
	if err != nil {
		t.Fatalf("Generate: %v", err)
	}
	return buf.Bytes(), st
}

// line is one decoded event line.
type line struct {
	ID, User, Kind, Channel, Campaign, Interaction, Action, Currency string
	Time                                                             time.Time
	Value                                                            float64
}

var twoDecimals = regexp.MustCompile(`"value":[0-9]+\.[0-9]{2}[,}]`)

// parseLines decodes every line strictly: exactly the contract's fields for
// its kind, with the contract's types (the event contract of internal/event/doc.go).
func parseLines(t *testing.T, data []byte) []line {
	t.Helper()
	touchFields := []string{"campaign", "channel", "id", "interaction", "kind", "time", "user"}
	actionFields := []string{"action", "currency", "id", "kind", "time", "user", "value"}
	var out []line
	sc := bufio.NewScanner(bytes.NewReader(data))
	sc.Buffer(make([]byte, 64<<10), 64<<10)
	for n := 1; sc.Scan(); n++ {
		raw := sc.Bytes()
		var m map[string]any
		if err := json.Unmarshal(raw, &m); err != nil {
			t.Fatalf("line %d: %v: %s", n, err, raw)
		}
		str := func(k string) string {
			s, ok := m[k].(string)
			if !ok || s == "" {
				t.Fatalf("line %d: field %q is not a non-empty string: %s", n, k, raw)
			}
			return s
		}
		var l line
		l.ID, l.User, l.Kind = str("id"), str("user"), str("kind")
		ts := str("time")
		tm, err := time.Parse(time.RFC3339Nano, ts)
		if err != nil || tm.Location() != time.UTC || !bytes.HasSuffix([]byte(ts), []byte("Z")) {
			t.Fatalf("line %d: time %q is not RFC 3339 UTC: %v", n, ts, err)
		}
		l.Time = tm
		want := touchFields
		switch l.Kind {
		case "touch":
			l.Channel, l.Campaign, l.Interaction = str("channel"), str("campaign"), str("interaction")
			if l.Interaction != "click" && l.Interaction != "view" {
				t.Fatalf("line %d: interaction %q", n, l.Interaction)
			}
			if !slices.Contains(Channels(), l.Channel) {
				t.Fatalf("line %d: channel %q not in Channels()", n, l.Channel)
			}
		case "action":
			want = actionFields
			l.Action, l.Currency = str("action"), str("currency")
			if !slices.Contains(actionNames[:], l.Action) {
				t.Fatalf("line %d: action %q", n, l.Action)
			}
			if l.Currency != Currency {
				t.Fatalf("line %d: currency %q, want %q", n, l.Currency, Currency)
			}
			v, ok := m["value"].(float64)
			if !ok || v < 0 || !twoDecimals.Match(raw) {
				t.Fatalf("line %d: value is not a number >= 0 with 2 decimals: %s", n, raw)
			}
			l.Value = v
		default:
			t.Fatalf("line %d: kind %q", n, l.Kind)
		}
		if got := slices.Sorted(maps.Keys(m)); !slices.Equal(got, want) {
			t.Fatalf("line %d: fields %v, want %v", n, got, want)
		}
		out = append(out, l)
	}
	if err := sc.Err(); err != nil {
		t.Fatal(err)
	}
	return out
}

// decodeLines decodes lines into typed fields only; parseLines is the strict
// contract check, this is the fast path for tests that count.
func decodeLines(t *testing.T, data []byte) []line {
	t.Helper()
	var out []line
	for raw := range bytes.Lines(data) {
		var l struct {
			ID, User, Kind, Channel, Campaign, Interaction, Action, Currency string
			Time                                                             time.Time
			Value                                                            float64
		}
		if err := json.Unmarshal(raw, &l); err != nil {
			t.Fatalf("%v: %s", err, raw)
		}
		out = append(out, line(l))
	}
	return out
}

func TestGenerateIsDeterministic(t *testing.T) {
	c := testConfig(3000)
	a, _ := generate(t, c)
	b, _ := generate(t, c)
	if !bytes.Equal(a, b) {
		t.Fatal("two runs with the same config wrote different bytes")
	}
	c.Seed++
	other, _ := generate(t, c)
	if bytes.Equal(a, other) {
		t.Fatal("a different seed wrote the same bytes")
	}
}

func TestGenerateWritesContractLines(t *testing.T) {
	c := testConfig(3000)
	data, st := generate(t, c)
	lines := parseLines(t, data)
	end := c.Start.Add(time.Duration(c.Days) * 24 * time.Hour)
	ids := make(map[string]bool, len(lines))
	got := Stats{PerChannelTouches: map[string]int{}}
	for _, name := range Channels() {
		got.PerChannelTouches[name] = 0 // Stats lists every channel, touched or not
	}
	var cents int64
	for i, l := range lines {
		if i > 0 && l.Time.Before(lines[i-1].Time) {
			t.Fatalf("line %d: time %v before the previous line's %v", i+1, l.Time, lines[i-1].Time)
		}
		if l.Time.Before(c.Start) || !l.Time.Before(end) {
			t.Fatalf("line %d: time %v outside [%v, %v)", i+1, l.Time, c.Start, end)
		}
		if ids[l.ID] {
			t.Fatalf("line %d: duplicate id %q", i+1, l.ID)
		}
		ids[l.ID] = true
		got.Events++
		if l.Kind == "touch" {
			got.Touches++
			got.PerChannelTouches[l.Channel]++
			continue
		}
		got.Actions++
		if l.Action == ActionOrder {
			got.Conversions++
			cents += int64(math.Round(l.Value * 100))
		}
	}
	got.Value = float64(cents) / 100
	if got.Events == 0 || got.Conversions == 0 {
		t.Fatalf("empty world: %+v", got)
	}
	if got.Events != st.Events || got.Touches != st.Touches || got.Actions != st.Actions ||
		got.Conversions != st.Conversions || math.Abs(got.Value-st.Value) > 1e-6 ||
		!maps.Equal(got.PerChannelTouches, st.PerChannelTouches) {
		t.Fatalf("counted from lines %+v, Stats %+v", got, st)
	}
	// About 5 events per visitor (the stated ratio, doc.go).
	if perVisitor := float64(st.Events) / float64(c.Visitors); perVisitor < 4 || perVisitor > 6.5 {
		t.Errorf("events per visitor = %.2f, want about 5", perVisitor)
	}
}

// sessionsOf splits each user's actions into sessions at gaps of 30 minutes
// or more (the 30-minute timeout: docs/references.md §1, common practice).
func sessionsOf(lines []line) [][]line {
	byUser := map[string][]line{}
	var users []string
	for _, l := range lines {
		if l.Kind != "action" {
			continue
		}
		if _, ok := byUser[l.User]; !ok {
			users = append(users, l.User)
		}
		byUser[l.User] = append(byUser[l.User], l)
	}
	var out [][]line
	for _, u := range users {
		acts := byUser[u]
		from := 0
		for i := 1; i <= len(acts); i++ {
			if i == len(acts) || acts[i].Time.Sub(acts[i-1].Time) >= 30*time.Minute {
				out = append(out, acts[from:i])
				from = i
			}
		}
	}
	return out
}

func TestIncidentRaisesCheckoutAbandonment(t *testing.T) {
	c := testConfig(20000)
	data, _ := generate(t, c)
	sessions := sessionsOf(decodeLines(t, data))
	// checkout sessions whose first checkout lies in the outage's clock
	// window, per day, and how many of them ended without a purchase.
	type tally struct{ checkouts, abandoned int }
	perDay := make([]tally, c.Days)
	for _, s := range sessions {
		i := slices.IndexFunc(s, func(l line) bool { return l.Action == ActionCheckout })
		if i < 0 {
			continue
		}
		at := s[i].Time.Sub(c.Start)
		day := int(at / (24 * time.Hour))
		clock := at - time.Duration(day)*24*time.Hour
		if clock < c.IncidentStart || clock >= c.IncidentStart+c.IncidentLength {
			continue
		}
		perDay[day].checkouts++
		if !slices.ContainsFunc(s[i:], func(l line) bool { return l.Action == ActionOrder }) {
			perDay[day].abandoned++
		}
	}
	var others tally
	for d, x := range perDay {
		if d != c.IncidentDay {
			others.checkouts += x.checkouts
			others.abandoned += x.abandoned
		}
	}
	in := perDay[c.IncidentDay]
	if in.checkouts < 10 || others.checkouts < 60 {
		t.Fatalf("too few checkouts to compare: incident %+v, other days %+v", in, others)
	}
	got := float64(in.abandoned) / float64(in.checkouts)
	base := float64(others.abandoned) / float64(others.checkouts)
	t.Logf("checkout abandonment %v-%v: outage day %.2f %+v, other days %.2f %+v",
		c.IncidentStart, c.IncidentStart+c.IncidentLength, got, in, base, others)
	// Invented world: 90 % of would-be purchases fail in the outage (world.go).
	if got < 0.8 || got < base+0.3 {
		t.Errorf("checkout abandonment in the outage = %.2f (%+v), same window other days = %.2f (%+v); want >= 0.8 and >= +0.3",
			got, in, base, others)
	}
}

// touchesPerDay counts touches per channel and day (day 0 = c.Start).
func touchesPerDay(t *testing.T, c Config) map[string][]float64 {
	t.Helper()
	data, _ := generate(t, c)
	out := map[string][]float64{}
	for _, name := range Channels() {
		out[name] = make([]float64, c.Days)
	}
	for _, l := range decodeLines(t, data) {
		if l.Kind == "touch" {
			out[l.Channel][int(l.Time.Sub(c.Start)/(24*time.Hour))]++
		}
	}
	return out
}

func sum(xs []float64) float64 {
	s := 0.0
	for _, x := range xs {
		s += x
	}
	return s
}

func TestBudgetShiftMovesTouches(t *testing.T) {
	c := testConfig(8000)
	shifted := touchesPerDay(t, c)
	flat := c
	flat.ShiftDay = c.Days // the same world without the shift
	unshifted := touchesPerDay(t, flat)

	tests := []struct {
		channel string
		// after/before: shifted over unshifted touches on the days from the
		// shift on. world.go: search_ads spends 0.4 of before, social_ads
		// twice as much (chances capped at 1, so a little under 2).
		min, max float64
	}{
		{"search_ads", 0.33, 0.47},
		{"social_ads", 1.6, 2.0},
		{"newsletter", 1, 1},
		{"review_partners", 1, 1},
		{"display_ads", 1, 1},
		{"podcast_spots", 1, 1},
	}
	for _, tt := range tests {
		t.Run("channel="+tt.channel, func(t *testing.T) {
			got := sum(shifted[tt.channel][c.ShiftDay:]) / sum(unshifted[tt.channel][c.ShiftDay:])
			if got < tt.min || got > tt.max {
				t.Errorf("touches from the shift day on, with/without shift = %.3f, want in [%.2f, %.2f]", got, tt.min, tt.max)
			}
			// before the shift only pre-visit views of later visitors can differ
			before := sum(shifted[tt.channel][:c.ShiftDay]) / sum(unshifted[tt.channel][:c.ShiftDay])
			if before < 0.97 || before > 1.03 {
				t.Errorf("touches before the shift day, with/without shift = %.3f, want about 1", before)
			}
		})
	}

	// Visible in one run: each channel's share of the day's touches, on the
	// days before the shift (from day 1: day 0 has no returning visitors)
	// against the days after it.
	share := func(channel string, from, to int) float64 {
		var own, all float64
		for name, days := range shifted {
			n := sum(days[from:to])
			all += n
			if name == channel {
				own += n
			}
		}
		return own / all
	}
	for _, tt := range []struct {
		channel  string
		min, max float64
	}{
		{"search_ads", 0, 0.6},
		{"social_ads", 1.4, math.Inf(1)},
	} {
		got := share(tt.channel, c.ShiftDay, c.Days) / share(tt.channel, 1, c.ShiftDay)
		if got < tt.min || got > tt.max {
			t.Errorf("%s: share of touches after/before the shift = %.2f, want in [%.2f, %.2f]", tt.channel, got, tt.min, tt.max)
		}
	}
}
