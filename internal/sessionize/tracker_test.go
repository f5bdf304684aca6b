package sessionize_test

import (
	"fmt"
	"math/rand"
	"sort"
	"testing"
	"time"

	"github.com/cespare/xxhash/v2"

	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/sessionize"
	"github.com/touchledger/touchledger/internal/tally"
)

func at(s string) time.Time {
	t, err := time.Parse(time.RFC3339, s)
	if err != nil {
		panic(err)
	}
	return t
}

var nextID int

func action(ts, name string) event.Event {
	nextID++
	return event.Event{ID: fmt.Sprint("a", nextID), User: "u", Time: at(ts), Kind: event.Action, Action: name}
}

func touch(ts, ch string, view bool) event.Event {
	nextID++
	e := event.Event{ID: fmt.Sprint("t", nextID), User: "u", Time: at(ts), Kind: event.Touch, Channel: ch}
	if view {
		e.Interaction = event.View
	}
	return e
}

// TestSessionGapBoundary: a gap of exactly the session gap starts a new
// session (rule "gap >= T"). Check values: docs/references.md §1 worked example,
// [computed]: with split if gap >= 30 min the session ids are 1,1,1,2,3,3,3.
// The 30-minute convention is common practice (it traces to Catledge &
// Pitkow 1995, whose cut-off was 25.5 minutes).
func TestSessionGapBoundary(t *testing.T) {
	tr, err := sessionize.NewTracker(defaultParams())
	if err != nil {
		t.Fatal(err)
	}
	times := []string{"2024-03-10T23:40:00Z", "2024-03-10T23:55:00Z", "2024-03-11T00:10:00Z",
		"2024-03-11T00:40:00Z", "2024-03-11T01:15:00Z", "2024-03-11T01:20:00Z", "2024-03-11T01:25:00Z"}
	want := []uint32{1, 1, 1, 2, 3, 3, 3}
	var u sessionize.UserState
	b := tally.NewBatch(60)
	for i, ts := range times {
		e := action(ts, "product_view")
		tr.Apply(&u, &e, xxhash.Sum64String(e.ID), b)
		if u.Sessions != want[i] {
			t.Errorf("event %d at %s: session %d, want %d", i+1, ts, u.Sessions, want[i])
		}
	}
	var sessions int64
	b.Range(func(k tally.Key, v tally.Vec) {
		if k.Family == tally.Activity {
			sessions += v[0]
		}
	})
	if sessions != 3 {
		t.Errorf("sessions counted = %d, want 3", sessions)
	}
}

// creditOf returns the credited conversions per channel for one model.
func creditOf(b *tally.Batch, model string) map[string]float64 {
	out := map[string]float64{}
	b.Range(func(k tally.Key, v tally.Vec) {
		if k.Family != tally.Credit {
			return
		}
		p := tally.Split(k.Dims)
		if p[0] == model {
			out[p[1]] += float64(v[0]) / sessionize.NanoPerConversion
		}
	})
	return out
}

// TestLookbackEdges: a click exactly 30 days and a view exactly 1 day before
// the conversion are eligible; a second later they are not (issue 2 item 5:
// eligible when conversion time − touch time <= the look-back; 30 days for
// clicks and 1 day for views are common practice).
func TestLookbackEdges(t *testing.T) {
	cases := []struct {
		name   string
		events []event.Event
		want   map[string]float64 // linear credit
	}{
		{"click at exactly 30d", []event.Event{touch("2026-01-01T00:00:00Z", "mail", false), action("2026-01-31T00:00:00Z", "order")},
			map[string]float64{"mail": 1}},
		{"click at 30d+1s", []event.Event{touch("2026-01-01T00:00:00Z", "mail", false), action("2026-01-31T00:00:01Z", "order")},
			map[string]float64{"direct": 1}},
		{"view at exactly 1d", []event.Event{touch("2026-01-01T00:00:00Z", "banner", true), action("2026-01-02T00:00:00Z", "order")},
			map[string]float64{"banner": 1}},
		{"view at 1d+1s", []event.Event{touch("2026-01-01T00:00:00Z", "banner", true), action("2026-01-02T00:00:01Z", "order")},
			map[string]float64{"direct": 1}},
		{"old view dropped, click kept", []event.Event{touch("2026-01-01T00:00:00Z", "banner", true), touch("2026-01-01T01:00:00Z", "mail", false), action("2026-01-03T00:00:00Z", "order")},
			map[string]float64{"mail": 1}},
		{"journey timeout: last touch exactly 30d before next touch keeps the journey",
			[]event.Event{touch("2026-01-01T00:00:00Z", "a", false), touch("2026-01-31T00:00:00Z", "b", false), action("2026-01-31T00:00:00Z", "order")},
			map[string]float64{"a": 0.5, "b": 0.5}},
		{"journey timeout: more than 30d ends it", []event.Event{touch("2026-01-01T00:00:00Z", "a", false), touch("2026-01-31T00:00:01Z", "b", false), action("2026-01-31T00:00:01Z", "order")},
			map[string]float64{"b": 1}},
		{"after a conversion the journey starts empty", []event.Event{touch("2026-01-01T00:00:00Z", "a", false), action("2026-01-01T01:00:00Z", "order"), action("2026-01-01T02:00:00Z", "order")},
			map[string]float64{"a": 1, "direct": 1}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			tr, _ := sessionize.NewTracker(defaultParams())
			var u sessionize.UserState
			b := tally.NewBatch(60)
			for i := range c.events {
				tr.Apply(&u, &c.events[i], xxhash.Sum64String(c.events[i].ID), b)
			}
			got := creditOf(b, "linear")
			if fmt.Sprint(got) != fmt.Sprint(c.want) {
				t.Errorf("linear credit = %v, want %v", got, c.want)
			}
		})
	}
}

// TestFiveTouchConversion: 50.00 after touches 28, 21, 14, 7 and 0 days
// before it (docs/references.md §2, [computed]; formulas common practice):
// linear 10.00 each; time-decay (half-life 7 d) 50/31 × (1, 2, 4, 8, 16);
// position-based 20, 10/3, 10/3, 10/3, 20.
func TestFiveTouchConversion(t *testing.T) {
	tr, _ := sessionize.NewTracker(defaultParams())
	var u sessionize.UserState
	b := tally.NewBatch(60)
	conv := at("2026-02-01T00:00:00Z")
	chs := []string{"display", "social", "email", "paid_search", "direct"}
	for i, ch := range chs {
		e := touch(conv.AddDate(0, 0, -28+7*i).Format(time.RFC3339), ch, false)
		tr.Apply(&u, &e, xxhash.Sum64String(e.ID), b)
	}
	e := action(conv.Format(time.RFC3339), "order")
	e.Value, e.HasValue = 50*event.ValueScale, true
	tr.Apply(&u, &e, xxhash.Sum64String(e.ID), b)
	value := func(model string) map[string]float64 {
		out := map[string]float64{}
		b.Range(func(k tally.Key, v tally.Vec) {
			if p := tally.Split(k.Dims); k.Family == tally.Credit && p[0] == model {
				out[p[1]] += float64(v[1]) / event.ValueScale
			}
		})
		return out
	}
	want := map[string][]float64{
		"linear":         {10, 10, 10, 10, 10},
		"time-decay":     {50.0 / 31, 100.0 / 31, 200.0 / 31, 400.0 / 31, 800.0 / 31},
		"position-based": {20, 10.0 / 3, 10.0 / 3, 10.0 / 3, 20},
		"first-touch":    {50, 0, 0, 0, 0},
		"last-touch":     {0, 0, 0, 0, 50},
		"last-marketing": {0, 0, 0, 50, 0},
	}
	for model, w := range want {
		got := value(model)
		var sum float64
		for i, ch := range chs {
			// Values are stored in micro-units apportioned by largest
			// remainder: within 1e-6 of the exact share.
			if d := got[ch] - w[i]; d > 1e-6 || d < -1e-6 {
				t.Errorf("%s/%s = %.6f, want %.6f", model, ch, got[ch], w[i])
			}
			sum += got[ch]
		}
		if sum != 50 {
			t.Errorf("%s: shares sum to %v, want exactly 50", model, sum)
		}
	}
}

// TestDuplicatesWithinHorizon: the same id for the same user is counted once
// within the horizon and accepted again after it (issue 2 item 7).
func TestDuplicatesWithinHorizon(t *testing.T) {
	tr, _ := sessionize.NewTracker(defaultParams())
	var u sessionize.UserState
	b := tally.NewBatch(60)
	e := action("2026-01-01T00:00:00Z", "order")
	h := xxhash.Sum64String(e.ID)
	if !tr.Apply(&u, &e, h, b) {
		t.Fatal("first copy rejected")
	}
	if tr.Apply(&u, &e, h, b) {
		t.Fatal("duplicate accepted")
	}
	later := action("2026-01-08T00:00:01Z", "product_view")
	tr.Apply(&u, &later, xxhash.Sum64String(later.ID), b)
	if u.HasSeen(h) {
		t.Error("id still remembered after the 7-day horizon")
	}
}

// TestReorderMatchesSortedOrder: events shuffled within the lateness come
// out in (time, arrival) order, the same as sorted input.
func TestReorderMatchesSortedOrder(t *testing.T) {
	rng := rand.New(rand.NewSource(3))
	const lateness = int64(5 * time.Minute)
	base := at("2026-01-01T00:00:00Z")
	var evs []event.Event
	for i := 0; i < 5000; i++ {
		evs = append(evs, event.Event{ID: fmt.Sprint(i), Time: base.Add(time.Duration(i) * time.Second / 2)})
	}
	// Arrival order = event time plus a random delay below the lateness,
	// so no event arrives after one more than the lateness newer.
	shuffled := append([]event.Event(nil), evs...)
	delay := make(map[string]time.Duration)
	for _, e := range shuffled {
		delay[e.ID] = time.Duration(rng.Int63n(lateness - int64(time.Second)))
	}
	sort.SliceStable(shuffled, func(i, j int) bool {
		return shuffled[i].Time.Add(delay[shuffled[i].ID]).Before(shuffled[j].Time.Add(delay[shuffled[j].ID]))
	})
	r := sessionize.NewReorder(lateness)
	var out []string
	for i := range shuffled {
		if r.Late(shuffled[i].Time.UnixNano()) {
			t.Fatalf("event %s judged late", shuffled[i].ID)
		}
		r.Push(&shuffled[i], uint64(i))
		r.Release(func(it *sessionize.Item) { out = append(out, it.Event.ID) })
	}
	r.Drain(func(it *sessionize.Item) { out = append(out, it.Event.ID) })
	for i := range evs {
		if out[i] != evs[i].ID {
			t.Fatalf("position %d: got %s, want %s", i, out[i], evs[i].ID)
		}
	}
	if !r.Late(base.UnixNano()) {
		t.Error("after a drain, older events must be late")
	}
}

// TestUserStateRoundTrip: the stored form decodes to the same state, and
// truncated input is an error, never a panic.
func TestUserStateRoundTrip(t *testing.T) {
	u := sessionize.UserState{LastAction: 5, SessionStart: 3, Sessions: 2, PathLen: 2, Path: []string{"product_view", "basket_add"},
		Touches: []sessionize.Touch{{Channel: "mail", Campaign: "spring", Time: 1, View: true}},
		Seen:    []sessionize.Seen{{Hash: 42, Time: 5}}}
	b := u.AppendBinary(nil)
	var got sessionize.UserState
	if err := got.UnmarshalBinary(b); err != nil {
		t.Fatal(err)
	}
	if fmt.Sprint(got) != fmt.Sprint(u) {
		t.Errorf("round trip = %+v, want %+v", got, u)
	}
	for i := 0; i < len(b); i++ {
		if err := got.UnmarshalBinary(b[:i]); err == nil {
			t.Errorf("truncated at %d: no error", i)
		}
	}
}
