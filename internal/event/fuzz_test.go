package event

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"slices"
	"strings"
	"testing"
	"time"
	"unicode/utf8"
)

// FuzzDecode checks, for any input: Decode does not panic; it returns either
// an event or a *RejectError with a known reason; what it accepts is valid
// JSON and UTF-8 by the standard library's reading, and its fields are what
// encoding/json, time.Parse and exact rational arithmetic (math/big) read
// from the payload; an accepted event meets the invariants in doc.go;
// re-encoded with encoding/json it decodes to the same Event; and a decoder
// with a configured currency accepts it exactly when its currency is empty
// or the same.
//
// Seeds live in testdata/fuzz/FuzzDecode. Run: go test -fuzz=FuzzDecode ./internal/event
func FuzzDecode(f *testing.F) {
	anyCurrency := NewDecoder(DefaultLimits(), "")
	euro := NewDecoder(DefaultLimits(), "EUR")
	f.Fuzz(func(t *testing.T, payload []byte) {
		ev, err := anyCurrency.Decode(payload)
		if err != nil {
			checkReject(t, payload, err)
			return
		}
		if !json.Valid(payload) || !utf8.Valid(payload) {
			t.Fatalf("accepted %q, which encoding/json or utf8 call invalid", payload)
		}
		checkInvariants(t, ev)
		checkAgainstStandardLibrary(t, payload, ev)

		again, err := anyCurrency.Decode(reencode(t, ev))
		if err != nil {
			t.Fatalf("re-encoded event %+v rejected: %v", ev, err)
		}
		if again != ev {
			t.Fatalf("re-encoded event changed\n got %+v\nwant %+v", again, ev)
		}

		_, err = euro.Decode(payload)
		var rej *RejectError
		switch {
		case ev.Currency == "" || ev.Currency == "EUR":
			if err != nil {
				t.Fatalf("EUR decoder rejected an event in %q: %v", ev.Currency, err)
			}
		case !errors.As(err, &rej) || rej.Reason != ReasonCurrency:
			t.Fatalf("EUR decoder on currency %q: err = %v, want reason currency", ev.Currency, err)
		}
	})
}

func checkReject(t *testing.T, payload []byte, err error) {
	t.Helper()
	rej, ok := err.(*RejectError)
	if !ok {
		t.Fatalf("Decode(%q) error %T %v, want *RejectError", payload, err, err)
	}
	if !slices.Contains(Reasons, rej.Reason) || rej.Reason == ReasonLate {
		t.Fatalf("Decode(%q): reason %q is not a decoder reason", payload, rej.Reason)
	}
	if rej.Msg == "" {
		t.Fatalf("Decode(%q): empty message", payload)
	}
	if rej.Reason == ReasonBadJSON && json.Valid(payload) && utf8.Valid(payload) &&
		!strings.Contains(rej.Msg, "surrogate") && !strings.Contains(rej.Msg, "not an object") && depth(payload) <= maxDepth {
		// encoding/json takes the same JSON, except lone surrogate escapes
		// (which it replaces) and nesting beyond maxDepth.
		t.Fatalf("Decode(%q) = bad_json (%s), but encoding/json calls it valid", payload, rej.Msg)
	}
}

// depth returns the deepest nesting of arrays and objects in valid JSON.
func depth(payload []byte) int {
	deepest, level, inString, escaped := 0, 0, false, false
	for _, c := range payload {
		switch {
		case escaped:
			escaped = false
		case inString && c == '\\':
			escaped = true
		case c == '"':
			inString = !inString
		case inString:
		case c == '[' || c == '{':
			level++
			deepest = max(deepest, level)
		case c == ']' || c == '}':
			level--
		}
	}
	return deepest
}

func checkInvariants(t *testing.T, ev Event) {
	t.Helper()
	lim := DefaultLimits()
	strs := []struct {
		name     string
		s        string
		limit    int
		required bool
	}{
		{"id", ev.ID, lim.MaxID, true},
		{"user", ev.User, lim.MaxUser, true},
		{"channel", ev.Channel, lim.MaxName, ev.Kind == Touch},
		{"campaign", ev.Campaign, lim.MaxName, false},
		{"action", ev.Action, lim.MaxName, ev.Kind == Action},
		{"currency", ev.Currency, lim.MaxName, false},
	}
	for _, f := range strs {
		if f.required && f.s == "" {
			t.Fatalf("accepted event %+v has an empty %s", ev, f.name)
		}
		if len(f.s) > f.limit || !utf8.ValidString(f.s) || strings.ContainsFunc(f.s, func(r rune) bool { return r < 0x20 || r == 0x7f }) {
			t.Fatalf("accepted event %+v has a bad %s %q", ev, f.name, f.s)
		}
	}
	switch ev.Kind {
	case Touch:
		if ev.Action != "" || ev.Value != 0 || ev.HasValue {
			t.Fatalf("touch %+v carries action fields", ev)
		}
	case Action:
		if ev.Channel != "" || ev.Campaign != "" || ev.Interaction != Click {
			t.Fatalf("action %+v carries touch fields", ev)
		}
	default:
		t.Fatalf("accepted event %+v has kind %v", ev, ev.Kind)
	}
	if ev.Value < 0 || ev.Value > maxMicro || (!ev.HasValue && ev.Value != 0) {
		t.Fatalf("accepted event %+v has value %d", ev, ev.Value)
	}
	if ev.Time.Location() != time.UTC || time.Unix(0, ev.Time.UnixNano()).UTC() != ev.Time {
		t.Fatalf("accepted event %+v: time not UTC or without exact unix nanoseconds", ev)
	}
}

// checkAgainstStandardLibrary reads an accepted payload with encoding/json
// and compares every field the event took from it.
func checkAgainstStandardLibrary(t *testing.T, payload []byte, ev Event) {
	t.Helper()
	var fields map[string]any
	dec := json.NewDecoder(bytes.NewReader(payload))
	dec.UseNumber()
	if err := dec.Decode(&fields); err != nil {
		t.Fatalf("encoding/json cannot read accepted %q: %v", payload, err)
	}
	text := func(key string) string {
		s, _ := fields[key].(string) // absent or null reads as ""
		return s
	}
	want := Event{ID: text("id"), User: text("user"), Kind: ev.Kind, Currency: text("currency")}
	if text("kind") != ev.Kind.String() {
		t.Fatalf("kind %q decoded as %v", text("kind"), ev.Kind)
	}
	at, ok := referenceTime(text("time"))
	if !ok {
		t.Fatalf("time %q accepted, but the reference reading rejects it", text("time"))
	}
	want.Time = at
	switch ev.Kind {
	case Touch:
		want.Channel, want.Campaign = text("channel"), text("campaign")
		if text("interaction") == "view" {
			want.Interaction = View
		}
	case Action:
		want.Action = text("action")
		if number, isNumber := fields["value"].(json.Number); isNumber {
			want.HasValue = true
			if exponent := strings.IndexAny(string(number), "eE"); exponent >= 0 && len(number)-exponent > 5 {
				want.Value = ev.Value // an exponent past ±999: math/big would take too long
			} else {
				want.Value, _ = exactMicroUnits(t, string(number))
			}
		}
	}
	if ev != want {
		t.Fatalf("payload %q\ndecoded   %+v\nreference %+v", payload, ev, want)
	}
}

// wireEvent is the event contract as encoding/json writes it.
type wireEvent struct {
	ID          string      `json:"id"`
	User        string      `json:"user"`
	Time        string      `json:"time"`
	Kind        string      `json:"kind"`
	Channel     string      `json:"channel,omitempty"`
	Campaign    string      `json:"campaign,omitempty"`
	Interaction string      `json:"interaction,omitempty"`
	Action      string      `json:"action,omitempty"`
	Value       json.Number `json:"value,omitempty"`
	Currency    string      `json:"currency,omitempty"`
}

// reencode writes ev as a producer would, the value in full decimals.
func reencode(t *testing.T, ev Event) []byte {
	t.Helper()
	w := wireEvent{ID: ev.ID, User: ev.User, Time: ev.Time.Format(time.RFC3339Nano), Kind: ev.Kind.String(),
		Channel: ev.Channel, Campaign: ev.Campaign, Action: ev.Action, Currency: ev.Currency}
	if ev.Kind == Touch {
		w.Interaction = ev.Interaction.String()
	}
	if ev.HasValue {
		w.Value = json.Number(fmt.Sprintf("%d.%06d", ev.Value/ValueScale, ev.Value%ValueScale))
	}
	b, err := json.Marshal(w)
	if err != nil {
		t.Fatalf("encode %+v: %v", ev, err)
	}
	return b
}

// TestReencodeRoundTrip runs the fuzz property on values where a float64 round
// trip would lose a micro-unit (about 2^52 micro-units and above) and on
// every accepted form of time.
func TestReencodeRoundTrip(t *testing.T) {
	tests := []string{
		`{"id":"a","user":"u","time":"2026-03-10T23:40:00.000000001+05:45","kind":"action","action":"order","value":4478354144.302263}`,
		`{"id":"a","user":"u","time":"1677-09-21T00:12:43.145224192Z","kind":"action","action":"order","value":999999999999.999999}`,
		`{"id":"a","user":"u","time":"2262-04-11T23:47:16.854775807Z","kind":"touch","channel":"c","interaction":"view","currency":"EUR"}`,
		`{"id":"<&>","user":"\u2028","time":"2026-03-10T23:40:00-12:00","kind":"touch","channel":"\ud83d\ude00","campaign":"\"q\""}`,
	}
	d := NewDecoder(DefaultLimits(), "")
	for _, in := range tests {
		want, err := d.Decode([]byte(in))
		if err != nil {
			t.Fatalf("Decode(%s): %v", in, err)
		}
		got, err := d.Decode(reencode(t, want))
		if err != nil || got != want {
			t.Errorf("round trip of %s\n got %+v, %v\nwant %+v", in, got, err, want)
		}
	}
}
