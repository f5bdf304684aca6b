package query

import (
	"bytes"
	"encoding/json"
	"math"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/tally"
)

var testPlan = Plan{Coverage: Coverage{From: time.Date(2026, 10, 1, 0, 0, 0, 0, time.UTC), To: time.Date(2026, 10, 8, 0, 0, 0, 0, time.UTC)}}

// TestPathsEndStateAndRate (issue 10 item 7, issue 11): a journey path's end
// state is its own field, and its conversion rate is over the journeys that
// share the path without its end. Hand-counted: social_ads alone 10
// journeys, 3 converted → rows (@lost 7, @converted 3), both with rate
// 3/10; social_ads → newsletter 4 journeys, all converted → one row, rate 1.
// Journeys without a touch ("") are not paths.
func TestPathsEndStateAndRate(t *testing.T) {
	tb := tally.Table{
		"social_ads":                           {10, 3, 0},
		tally.Join("social_ads", "newsletter"): {4, 4, 0},
		"":                                     {5, 5, 0},
	}
	a := Paths("channel", 0, 8, testPlan, tb)
	type row struct {
		path             string
		end              string
		count, pathCount int64
		conversions      int64
		rate, share      float64
	}
	want := []row{
		{"social_ads", event.StateLost, 7, 10, 3, 0.3, 7.0 / 14},
		{"social_ads,newsletter", event.StateConverted, 4, 4, 4, 1, 4.0 / 14},
		{"social_ads", event.StateConverted, 3, 10, 3, 0.3, 3.0 / 14},
	}
	if a.Total != 14 {
		t.Errorf("total = %d, want 14", a.Total)
	}
	if len(a.Paths) != len(want) {
		t.Fatalf("%d rows, want %d: %+v", len(a.Paths), len(want), a.Paths)
	}
	for i, w := range want {
		g := a.Paths[i]
		if strings.Join(g.Path, ",") != w.path || g.End != w.end || g.Count != w.count || g.PathCount != w.pathCount ||
			g.Conversions != w.conversions || math.Abs(g.ConversionRate-w.rate) > 1e-15 || math.Abs(g.Share-w.share) > 1e-15 {
			t.Errorf("row %d = %+v, want %+v", i, g, w)
		}
	}
	if got, want := a.Paths[1].Key(), "social_ads → newsletter → @converted"; got != want {
		t.Errorf("Key() = %q, want %q", got, want)
	}

	var buf bytes.Buffer
	if err := WriteJSON(&buf, a); err != nil {
		t.Fatal(err)
	}
	var back struct {
		Paths []struct {
			Path []string `json:"path"`
			End  string   `json:"end"`
		} `json:"paths"`
	}
	if err := json.Unmarshal(buf.Bytes(), &back); err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(back.Paths[1].Path, []string{"social_ads", "newsletter"}) || back.Paths[1].End != "@converted" {
		t.Errorf("JSON row 1 = %+v, want path [social_ads newsletter] and end @converted", back.Paths[1])
	}

	buf.Reset()
	if err := WritePaths(&buf, a, CSV); err != nil {
		t.Fatal(err)
	}
	if want := "channel,2026-10-01T00:00:00Z,2026-10-08T00:00:00Z,social_ads → newsletter,@converted,4,"; !strings.Contains(buf.String(), want) {
		t.Errorf("CSV lacks %q:\n%s", want, buf.String())
	}
}

// TestPathsSessions: session paths carry no end state; the rate is over the
// row itself. Paths cut to the same steps (a → … → c with maxLen 2) add up.
func TestPathsSessions(t *testing.T) {
	tb := tally.Table{
		tally.Join("a", "b", "c"): {6, 1, 0},
		tally.Join("a", "d", "c"): {2, 1, 0},
		tally.Join("a", "a"):      {2, 0, 0},
	}
	a := Paths("action", 0, 2, testPlan, tb)
	if len(a.Paths) != 2 {
		t.Fatalf("rows %+v, want 2", a.Paths)
	}
	g := a.Paths[0]
	if !slices.Equal(g.Path, []string{"a", "…", "c"}) || g.End != "" || g.Count != 8 || g.PathCount != 8 || g.Conversions != 2 || g.ConversionRate != 0.25 {
		t.Errorf("row 0 = %+v, want [a … c], 8 sessions, 2 converted, rate 0.25", g)
	}
	if g := a.Paths[1]; !slices.Equal(g.Path, []string{"a"}) || g.Count != 2 {
		t.Errorf("row 1 = %+v, want [a] (repeats collapsed), 2 sessions", g)
	}
}

// TestFunnelUnknownsAreNull (issue 10 item 7): the last step has no next
// step, so its abandonment is null, not 0; so are shares over no sessions.
// Hand-counted: depths 1, 2, 3 with 5, 3, 2 sessions → reached 10, 5, 2;
// abandonment 1/2, 3/5, null; overall 2/10; basket sessions 3 + 2, 1 + 2
// of them converted → basket abandonment 2/5.
func TestFunnelUnknownsAreNull(t *testing.T) {
	steps := []string{"product_view", "basket_add", "order"}
	a := Funnel(steps, testPlan, tally.Table{"1": {5, 0, 0}, "2": {3, 3, 1}, "3": {2, 2, 2}})
	wantAb := []*float64{ptr(0.5), ptr(0.6), nil}
	for i, s := range a.Steps {
		w := wantAb[i]
		if (s.Abandonment == nil) != (w == nil) || (w != nil && math.Abs(*s.Abandonment-*w) > 1e-15) {
			t.Errorf("step %s abandonment = %v, want %v", s.Step, s.Abandonment, w)
		}
	}
	if a.OverallConversion == nil || *a.OverallConversion != 0.2 || a.BasketAbandonment == nil || math.Abs(*a.BasketAbandonment-2.0/5) > 1e-15 {
		t.Errorf("overall %v, basket %v; want 0.2 and 2/5", derefF(a.OverallConversion), derefF(a.BasketAbandonment))
	}
	var buf bytes.Buffer
	if err := WriteJSON(&buf, a); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(buf.String(), `"step": "order",
      "sessions": 2,
      "abandonment": null`) {
		t.Errorf("JSON of the last step lacks \"abandonment\": null:\n%s", buf.String())
	}

	empty := Funnel(steps, testPlan, tally.Table{})
	buf.Reset()
	if err := WriteJSON(&buf, empty); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{`"basket_abandonment": null`, `"overall_conversion": null`} {
		if !strings.Contains(buf.String(), k) {
			t.Errorf("JSON of an empty funnel lacks %s:\n%s", k, buf.String())
		}
	}
	buf.Reset()
	if err := WriteFunnel(&buf, empty, Table); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(buf.String(), "basket abandonment - of 0 basket sessions · first to last step -") {
		t.Errorf("table of an empty funnel:\n%s", buf.String())
	}
}

// TestCreditNamesModelByID (issue 10 item 7): JSON and CSV carry the model's
// id and, for markov, its order apart; only tables show "markov (order 2)".
// Two journeys a → b, one converted: at order 2 the chain is
// @entry → a → (a,b) → @converted/@lost, both channels needed, shares 1/2.
func TestCreditNamesModelByID(t *testing.T) {
	paths := tally.Table{tally.Join("a", "b"): {2, 1, 10 * event.ValueScale}}
	totals := tally.Table{"": {1, 10 * event.ValueScale, 0}}
	a, err := DataDrivenCredit(ModelMarkov, 2, testPlan, Params{Direct: "direct", CollapseRepeats: true, ShapleyCap: 15}, totals, paths)
	if err != nil {
		t.Fatal(err)
	}
	if a.Model != "markov" || a.Order != 2 {
		t.Errorf("model %q order %d, want markov 2", a.Model, a.Order)
	}
	for _, c := range a.Channels {
		if math.Abs(c.Share-0.5) > 1e-12 {
			t.Errorf("%s share %v, want 1/2", c.Channel, c.Share)
		}
	}
	var buf bytes.Buffer
	if err := WriteJSON(&buf, a); err != nil {
		t.Fatal(err)
	}
	if s := buf.String(); !strings.Contains(s, `"model": "markov",`) || !strings.Contains(s, `"order": 2,`) {
		t.Errorf("JSON does not name the model by id and order:\n%s", s)
	}
	buf.Reset()
	if err := WriteCredit(&buf, a, CSV, false); err != nil {
		t.Fatal(err)
	}
	if s := buf.String(); !strings.HasPrefix(s, "model,order,from,to,channel,") || !strings.Contains(s, "\nmarkov,2,") {
		t.Errorf("CSV:\n%s", s)
	}
	buf.Reset()
	if err := WriteCredit(&buf, a, Table, false); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(buf.String(), "model markov (order 2)") {
		t.Errorf("table heading:\n%s", buf.String())
	}
	if got := ModelLabel("last-marketing", 0); got != "last-marketing" {
		t.Errorf("ModelLabel(last-marketing) = %q", got)
	}
}

func ptr(x float64) *float64 { return &x }

func derefF(x *float64) any {
	if x == nil {
		return nil
	}
	return *x
}
