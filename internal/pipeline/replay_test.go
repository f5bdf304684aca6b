package pipeline

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"math"
	"math/rand"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"testing"
	"time"

	"github.com/touchledger/touchledger/demo/shop"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/credit"
	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/sessionize"
	"github.com/touchledger/touchledger/internal/state"
)

const day = 24 * time.Hour

// testConfig is the documented default configuration (issue 2 item 3).
func testConfig() Config {
	return Config{
		Tracker: sessionize.Params{
			SessionGap:     30 * time.Minute,
			ClickLookback:  30 * day,
			ViewLookback:   day,
			JourneyTimeout: 30 * day,
			DedupHorizon:   7 * day,
			Conversions:    []string{"order"},
			Credit:         credit.Params{HalfLife: 7 * day, First: 0.4, Middle: 0.2, Last: 0.4, Direct: "direct"},
			MaxPath:        64,
			MaxTouches:     100,
		},
		Lateness:       5 * time.Minute,
		Limits:         event.DefaultLimits(),
		CacheUsers:     1000,
		CommitEvents:   5000,
		CommitInterval: time.Second,
	}
}

func replayBytes(t testing.TB, dir string, cfg Config, source string, input []byte) Checkpoint {
	t.Helper()
	ctx := context.Background()
	st, err := state.Open(ctx, state.DefaultOptions(dir))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	rf, err := OpenRejectFile(filepath.Join(dir, "rejects.jsonl"))
	if err != nil {
		t.Fatal(err)
	}
	defer rf.Close()
	p, err := New(st, cfg, rf, nil)
	if err != nil {
		t.Fatal(err)
	}
	cp, err := Replay(ctx, p, source, bytes.NewReader(input), cfg.Limits.MaxPayload)
	if err != nil {
		t.Fatal(err)
	}
	if err := p.Close(); err != nil {
		t.Fatal(err)
	}
	return cp
}

// answers collects every rule model's credit by channel and campaign over
// the whole data set, and a 14-day shift, as JSON text for comparison.
func answers(t testing.TB, dir string) map[string]query.CreditAnswer {
	t.Helper()
	st, err := state.Open(context.Background(), state.DefaultOptions(dir))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	q, err := query.NewQuerier(st, query.ParamsFrom(config.Default()))
	if err != nil {
		t.Fatal(err)
	}
	defer q.Close()
	out := map[string]query.CreditAnswer{}
	for _, m := range credit.RuleModels {
		for _, by := range []string{query.ByChannel, query.ByCampaign} {
			a, err := q.Credit(m.String(), by, 0, query.Span{Last: 400 * day})
			if err != nil {
				t.Fatal(err)
			}
			out[m.String()+"/"+by] = a
		}
	}
	return out
}

func demoInput(t testing.TB, visitors, days int) []byte {
	t.Helper()
	c := shop.DefaultConfig()
	c.Visitors = visitors
	c.Days = days
	c.ShiftDay = days / 2
	c.IncidentDay = days - 1
	var buf bytes.Buffer
	if _, err := shop.Generate(&buf, c); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

// TestReplayMatchesIndependentComputation replays demo events and checks
// every rule-based model against a straightforward batch computation of the
// rules of issue 2 (items 4–6), written here without the engine's code: sort
// each user's events, cut journeys, pick eligible touches, weigh them with
// the formulas of docs/references.md §2 (common practice, no published source).
func TestReplayMatchesIndependentComputation(t *testing.T) {
	input := demoInput(t, 3000, 10)
	dir := t.TempDir()
	cp := replayBytes(t, dir, testConfig(), "demo", input)
	got := answers(t, dir)
	want := referenceCredit(t, input)
	if cp.Counts.Accepted == 0 || cp.Counts.RejectedTotal() != 0 || cp.Counts.Late != 0 {
		t.Fatalf("counts = %+v, want all accepted", cp.Counts)
	}
	for _, m := range credit.RuleModels {
		a := got[m.String()+"/channel"]
		w := want[m.String()]
		if a.Conversions != w.conversions {
			t.Errorf("%s: conversions = %d, want %d", m, a.Conversions, w.conversions)
		}
		if math.Abs(a.Value-w.value) > 1e-6 {
			t.Errorf("%s: value = %f, want %f", m, a.Value, w.value)
		}
		gotCh := map[string]query.ChannelCredit{}
		for _, c := range a.Channels {
			gotCh[c.Channel] = c
		}
		if len(gotCh) != len(w.conv) {
			t.Errorf("%s: channels %v, want %v", m, keys(gotCh), w.conv)
		}
		for ch, wc := range w.conv {
			// Stored credit is rounded to 1e-9 conversions and 1e-6 value
			// units per conversion (largest remainder), hence the tolerance.
			tol := 1e-9 * float64(w.conversions+1)
			if d := math.Abs(gotCh[ch].Conversions - wc); d > tol {
				t.Errorf("%s/%s: conversions = %.9f, want %.9f", m, ch, gotCh[ch].Conversions, wc)
			}
			if d := math.Abs(gotCh[ch].Value - w.val[ch]); d > 1e-6*float64(w.conversions+1) {
				t.Errorf("%s/%s: value = %.6f, want %.6f", m, ch, gotCh[ch].Value, w.val[ch])
			}
		}
	}
}

func keys[V any](m map[string]V) []string {
	var out []string
	for k := range m {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}

type refAnswer struct {
	conversions int64
	value       float64
	conv, val   map[string]float64
}

// referenceCredit is the independent computation.
func referenceCredit(t testing.TB, input []byte) map[string]*refAnswer {
	type ev struct {
		ID, User, Time, Kind, Channel, Interaction, Action string
		Value                                              *float64
		t                                                  time.Time
		line                                               int
	}
	byUser := map[string][]ev{}
	for i, line := range strings.Split(string(input), "\n") {
		if strings.TrimSpace(line) == "" {
			continue
		}
		var e ev
		if err := json.Unmarshal([]byte(line), &e); err != nil {
			continue
		}
		tm, err := time.Parse(time.RFC3339Nano, e.Time)
		if err != nil {
			continue
		}
		e.t, e.line = tm, i
		byUser[e.User] = append(byUser[e.User], e)
	}
	models := []string{"first-touch", "last-touch", "last-marketing", "linear", "time-decay", "position-based"}
	out := map[string]*refAnswer{}
	for _, m := range models {
		out[m] = &refAnswer{conv: map[string]float64{}, val: map[string]float64{}}
	}
	type touch struct {
		ch   string
		t    time.Time
		view bool
	}
	for _, evs := range byUser {
		sort.SliceStable(evs, func(i, j int) bool { return evs[i].t.Before(evs[j].t) })
		var journey []touch
		seen := map[string]bool{}
		for _, e := range evs {
			if seen[e.ID] {
				continue
			}
			seen[e.ID] = true
			if n := len(journey); n > 0 && e.t.Sub(journey[n-1].t) > 30*day {
				journey = nil
			}
			if e.Kind == "touch" {
				journey = append(journey, touch{e.Channel, e.t, e.Interaction == "view"})
				continue
			}
			if e.Action != "order" {
				continue
			}
			v := 0.0
			if e.Value != nil {
				v = *e.Value
			}
			var el []touch
			for _, tc := range journey {
				lb := 30 * day
				if tc.view {
					lb = day
				}
				if e.t.Sub(tc.t) <= lb {
					el = append(el, tc)
				}
			}
			journey = nil
			for _, m := range models {
				r := out[m]
				r.conversions++
				r.value += v
				if len(el) == 0 {
					r.conv["direct"]++
					r.val["direct"] += v
					continue
				}
				n := len(el)
				w := make([]float64, n)
				switch m {
				case "first-touch":
					w[0] = 1
				case "last-touch":
					w[n-1] = 1
				case "last-marketing":
					k := n - 1
					for i := n - 1; i >= 0; i-- {
						if el[i].ch != "direct" {
							k = i
							break
						}
					}
					w[k] = 1
				case "linear":
					for i := range w {
						w[i] = 1 / float64(n)
					}
				case "time-decay":
					s := 0.0
					for i := range w {
						w[i] = math.Pow(2, -e.t.Sub(el[i].t).Hours()/(7*24))
						s += w[i]
					}
					for i := range w {
						w[i] /= s
					}
				case "position-based":
					switch n {
					case 1:
						w[0] = 1
					case 2:
						w[0], w[1] = 0.5, 0.5
					default:
						w[0], w[n-1] = 0.4, 0.4
						for i := 1; i < n-1; i++ {
							w[i] = 0.2 / float64(n-2)
						}
					}
				}
				for i, tc := range el {
					r.conv[tc.ch] += w[i]
					r.val[tc.ch] += w[i] * v
				}
			}
		}
	}
	for _, r := range out {
		for ch, c := range r.conv {
			if c == 0 && r.val[ch] == 0 {
				delete(r.conv, ch)
			}
		}
	}
	return out
}

// TestReplayDisorderDuplicatesAndJunk feeds the same events shuffled within
// the allowed lateness, with duplicates and malformed lines mixed in, and
// expects identical answers to the clean input and every bad line in the
// rejects file (issue 2, "How it must be checked").
func TestReplayDisorderDuplicatesAndJunk(t *testing.T) {
	clean := demoInput(t, 1500, 6)
	lines := strings.Split(strings.TrimSpace(string(clean)), "\n")
	rng := rand.New(rand.NewSource(7))
	// Shuffle within windows whose event-time span is under the lateness:
	// sort by (time + jitter in [0, 4 min)), which moves no event more than 4
	// minutes of event time.
	type keyed struct {
		line string
		key  time.Time
	}
	var ks []keyed
	for _, l := range lines {
		var e struct{ Time string }
		if err := json.Unmarshal([]byte(l), &e); err != nil {
			t.Fatal(err)
		}
		tm, _ := time.Parse(time.RFC3339Nano, e.Time)
		ks = append(ks, keyed{l, tm.Add(time.Duration(rng.Int63n(int64(4 * time.Minute))))})
	}
	sort.SliceStable(ks, func(i, j int) bool { return ks[i].key.Before(ks[j].key) })
	junk := []string{
		`{"id":"x1","user":"u","time":"not a time","kind":"touch","channel":"a"}`,
		`{"id":"x2","user":"u","time":"2026-10-02T00:00:00Z","kind":"teleport"}`,
		`not json at all`,
		`{"id":"","user":"u","time":"2026-10-02T00:00:00Z","kind":"action","action":"order"}`,
		`{"id":"x3","user":"u","time":"2026-10-02T00:00:00Z","kind":"action","action":"order","value":-5}`,
		"{\"id\":\"x4\",\"user\":\"\xff\xfe\",\"time\":\"2026-10-02T00:00:00Z\",\"kind\":\"touch\",\"channel\":\"a\"}",
		`{"id":"x5","user":"u","time":"2026-10-02T00:00:00Z","kind":"touch"}`,
	}
	var out []string
	dups := 0
	for i, k := range ks {
		out = append(out, k.line)
		if i%50 == 0 {
			out = append(out, k.line) // immediate duplicate
			dups++
		}
		if i%97 == 0 && i > 0 {
			out = append(out, ks[i-1].line) // duplicate of a recent event
			dups++
		}
		if i%300 == 0 {
			out = append(out, junk[(i/300)%len(junk)])
		}
	}
	nJunk := 0
	for _, l := range out {
		for _, j := range junk {
			if l == j {
				nJunk++
			}
		}
	}
	dirty := []byte(strings.Join(out, "\n") + "\n")

	dirClean, dirDirty := t.TempDir(), t.TempDir()
	cpClean := replayBytes(t, dirClean, testConfig(), "in", clean)
	cpDirty := replayBytes(t, dirDirty, testConfig(), "in", dirty)
	if cpDirty.Counts.Accepted != cpClean.Counts.Accepted {
		t.Errorf("accepted = %d, want %d", cpDirty.Counts.Accepted, cpClean.Counts.Accepted)
	}
	if cpDirty.Counts.Duplicate != uint64(dups) {
		t.Errorf("duplicates = %d, want %d", cpDirty.Counts.Duplicate, dups)
	}
	if cpDirty.Counts.RejectedTotal() != uint64(nJunk) || cpDirty.Counts.Late != 0 {
		t.Errorf("rejected = %d (late %d), want %d", cpDirty.Counts.RejectedTotal(), cpDirty.Counts.Late, nJunk)
	}
	a, b := answers(t, dirClean), answers(t, dirDirty)
	ja, _ := json.Marshal(a)
	jb, _ := json.Marshal(b)
	if !bytes.Equal(ja, jb) {
		t.Errorf("answers differ:\nclean %s\ndirty %s", ja[:min(400, len(ja))], jb[:min(400, len(jb))])
	}
	rej, err := os.ReadFile(filepath.Join(dirDirty, "rejects.jsonl"))
	if err != nil {
		t.Fatal(err)
	}
	rl := strings.Split(strings.TrimSpace(string(rej)), "\n")
	if len(rl) != nJunk {
		t.Fatalf("rejects file has %d lines, want %d", len(rl), nJunk)
	}
	for _, l := range rl {
		var r struct {
			Line   int
			Reason string
			Text   *string
			Base64 string
		}
		if err := json.Unmarshal([]byte(l), &r); err != nil {
			t.Fatal(err)
		}
		if r.Line < 1 || r.Line > len(out) || r.Reason == "" {
			t.Errorf("bad reject record %s", l)
		}
		if r.Text != nil && *r.Text != out[r.Line-1] {
			t.Errorf("reject line %d text %q, want %q", r.Line, *r.Text, out[r.Line-1])
		}
	}
	// Running the same input again changes nothing.
	again := replayBytes(t, dirDirty, testConfig(), "in", dirty)
	if fmt.Sprint(again.Counts) != fmt.Sprint(cpDirty.Counts) {
		t.Errorf("second run counts %+v, want %+v", again.Counts, cpDirty.Counts)
	}
	c := answers(t, dirDirty)
	jc, _ := json.Marshal(c)
	if !bytes.Equal(jb, jc) {
		t.Error("answers changed after running the same input twice")
	}
}
