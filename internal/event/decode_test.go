package event

import (
	"errors"
	"strings"
	"testing"
	"time"
	"unicode"
)

// The expected values below follow the event contract in doc.go
// and the limits of issue 2 (payload ≤ 64 KiB, id ≤ 128, user ≤ 256,
// channel/campaign/action ≤ 128 bytes). Times are checked against the
// standard library's RFC 3339 reading; values against ValueScale = 10^6.

func TestDefaultLimits(t *testing.T) {
	got := DefaultLimits()
	want := Limits{MaxPayload: 65536, MaxID: 128, MaxUser: 256, MaxName: 128} // issue 2, "Events and validation"
	if got != want {
		t.Errorf("DefaultLimits() = %+v, want %+v", got, want)
	}
}

func TestDecodeAccepts(t *testing.T) {
	at := time.Date(2026, 3, 10, 23, 40, 0, 0, time.UTC)
	touch := func(mod func(*Event)) Event {
		ev := Event{ID: "e1", User: "u1", Time: at, Kind: Touch, Channel: "newsletter"}
		if mod != nil {
			mod(&ev)
		}
		return ev
	}
	action := func(mod func(*Event)) Event {
		ev := Event{ID: "e2", User: "u1", Time: at, Kind: Action, Action: "order"}
		if mod != nil {
			mod(&ev)
		}
		return ev
	}
	const touchHead = `{"id":"e1","user":"u1","kind":"touch","channel":"newsletter",`
	const actionHead = `{"id":"e2","user":"u1","time":"2026-03-10T23:40:00Z","kind":"action","action":"order"`
	tests := []struct {
		name     string
		currency string // the decoder's
		in       string
		want     Event
	}{
		{"touch minimal, default click", "", touchHead + `"time":"2026-03-10T23:40:00Z"}`, touch(nil)},
		{"touch explicit click", "", touchHead + `"time":"2026-03-10T23:40:00Z","interaction":"click"}`, touch(nil)},
		{"touch view with campaign", "", touchHead + `"time":"2026-03-10T23:40:00Z","campaign":"spring","interaction":"view"}`,
			touch(func(e *Event) { e.Campaign = "spring"; e.Interaction = View })},
		{"@ inside a campaign is not reserved", "", touchHead + `"time":"2026-03-10T23:40:00Z","campaign":"spring@shop"}`,
			touch(func(e *Event) { e.Campaign = "spring@shop" })},
		{"touch null campaign and interaction", "", touchHead + `"time":"2026-03-10T23:40:00Z","campaign":null,"interaction":null}`, touch(nil)},
		{"touch empty interaction means click", "", touchHead + `"time":"2026-03-10T23:40:00Z","interaction":""}`, touch(nil)},
		{"offset 23:59", "", touchHead + `"time":"2026-03-11T23:39:00+23:59"}`, touch(nil)},
		{"positive offset stored as utc", "", touchHead + `"time":"2026-03-11T01:40:00+02:00"}`, touch(nil)},
		{"negative half-hour offset", "", touchHead + `"time":"2026-03-10T20:10:00-03:30"}`, touch(nil)},
		{"zero offset", "", touchHead + `"time":"2026-03-10T23:40:00+00:00"}`, touch(nil)},
		{"offset across a day", "", touchHead + `"time":"2026-03-11T09:40:00+10:00"}`, touch(nil)},
		{"fractional milliseconds", "", touchHead + `"time":"2026-03-10T23:40:00.250Z"}`,
			touch(func(e *Event) { e.Time = at.Add(250 * time.Millisecond) })},
		{"fractional nanoseconds with offset", "", touchHead + `"time":"2026-03-11T00:40:00.123456789+01:00"}`,
			touch(func(e *Event) { e.Time = at.Add(123456789 * time.Nanosecond) })},
		{"unix epoch", "", touchHead + `"time":"1970-01-01T00:00:00Z"}`, touch(func(e *Event) { e.Time = time.Unix(0, 0).UTC() })},
		{"unknown fields ignored", "", touchHead + `"time":"2026-03-10T23:40:00Z","page":"/p/1","tags":["a",1,null],"ctx":{"ua":"x","n":[{"d":1.5e3}]},"ok":true}`, touch(nil)},
		{"fields of the other kind ignored", "", touchHead + `"time":"2026-03-10T23:40:00Z","value":"junk","action":7}`, touch(nil)},
		{"key written with escapes", "", `{"\u0069d":"e1","user":"u1","kind":"touch","channel":"newsletter","time":"2026-03-10T23:40:00Z"}`, touch(nil)},
		{"escaped strings are unescaped", "", `{"id":"e\/1","user":"\u00e9l\u00e8ve \ud83d\ude00","kind":"touch","channel":"news\"letter","time":"2026-03-10T23:40:00Z"}`,
			touch(func(e *Event) { e.ID = "e/1"; e.User = "élève 😀"; e.Channel = `news"letter` })},
		{"whitespace around and inside", "", " \t\r\n{ \"id\" : \"e1\" , \"user\":\"u1\",\n\"kind\":\"touch\",\"channel\":\"newsletter\",\"time\":\"2026-03-10T23:40:00Z\" }\r\n", touch(nil)},
		{"deep nesting in an unknown field ignored", "", touchHead + `"time":"2026-03-10T23:40:00Z","deep":` + nested(maxDepth-2) + `}`, touch(nil)},
		{"currency matches", "EUR", touchHead + `"time":"2026-03-10T23:40:00Z","currency":"EUR"}`, touch(func(e *Event) { e.Currency = "EUR" })},
		{"currency empty with configured currency", "EUR", touchHead + `"time":"2026-03-10T23:40:00Z","currency":""}`, touch(nil)},
		{"currency null", "EUR", touchHead + `"time":"2026-03-10T23:40:00Z","currency":null}`, touch(nil)},
		{"any currency accepted", "", touchHead + `"time":"2026-03-10T23:40:00Z","currency":"JPY"}`, touch(func(e *Event) { e.Currency = "JPY" })},

		{"action without value", "", actionHead + `}`, action(nil)},
		{"action null value", "", actionHead + `,"value":null}`, action(nil)},
		// Value = round_half_away(v × 10^6), ValueScale = 10^6 (event.go).
		{"value 0", "", actionHead + `,"value":0}`, action(func(e *Event) { e.HasValue = true })},
		{"value negative zero", "", actionHead + `,"value":-0.0}`, action(func(e *Event) { e.HasValue = true })},
		{"value integer", "", actionHead + `,"value":50}`, action(func(e *Event) { e.Value = 50_000_000; e.HasValue = true })},
		{"value cents", "", actionHead + `,"value":49.99}`, action(func(e *Event) { e.Value = 49_990_000; e.HasValue = true })},
		{"value exponent", "", actionHead + `,"value":12.5E2}`, action(func(e *Event) { e.Value = 1_250_000_000; e.HasValue = true })},
		{"value negative exponent", "", actionHead + `,"value":125e-2}`, action(func(e *Event) { e.Value = 1_250_000; e.HasValue = true })},
		{"value one micro-unit", "", actionHead + `,"value":0.000001}`, action(func(e *Event) { e.Value = 1; e.HasValue = true })},
		{"value half micro-unit rounds away from zero", "", actionHead + `,"value":0.0000005}`, action(func(e *Event) { e.Value = 1; e.HasValue = true })},
		{"value below half micro-unit rounds down", "", actionHead + `,"value":0.00000049999}`, action(func(e *Event) { e.HasValue = true })},
		{"value tiny", "", actionHead + `,"value":1e-400}`, action(func(e *Event) { e.HasValue = true })},
		{"value leading fraction zeros", "", actionHead + `,"value":0.0025e3}`, action(func(e *Event) { e.Value = 2_500_000; e.HasValue = true })},
		// 4478354144.302263: float64 rounding gives ...264 on a round trip; the decimal reading stays exact.
		{"value with 16 significant digits", "", actionHead + `,"value":4478354144.302263}`, action(func(e *Event) { e.Value = 4_478_354_144_302_263; e.HasValue = true })},
		{"value at the limit 1e12", "", actionHead + `,"value":1e12}`, action(func(e *Event) { e.Value = 1_000_000_000_000_000_000; e.HasValue = true })},
		{"value at the limit written out", "", actionHead + `,"value":1000000000000.000000}`, action(func(e *Event) { e.Value = 1_000_000_000_000_000_000; e.HasValue = true })},
		{"value just below the limit rounds up to it", "", actionHead + `,"value":999999999999.9999995}`, action(func(e *Event) { e.Value = 1_000_000_000_000_000_000; e.HasValue = true })},
		{"action with currency", "EUR", actionHead + `,"value":10,"currency":"EUR"}`, action(func(e *Event) { e.Value = 10_000_000; e.HasValue = true; e.Currency = "EUR" })},
		{"action ignores touch fields", "", actionHead + `,"channel":5,"interaction":"hover"}`, action(nil)},
		{"id at its limit", "", `{"id":"` + strings.Repeat("i", 128) + `","user":"u1","time":"2026-03-10T23:40:00Z","kind":"action","action":"order"}`,
			action(func(e *Event) { e.ID = strings.Repeat("i", 128) })},
		{"user at its limit", "", `{"id":"e2","user":"` + strings.Repeat("u", 256) + `","time":"2026-03-10T23:40:00Z","kind":"action","action":"order"}`,
			action(func(e *Event) { e.User = strings.Repeat("u", 256) })},
		{"action at its limit", "", `{"id":"e2","user":"u1","time":"2026-03-10T23:40:00Z","kind":"action","action":"` + strings.Repeat("a", 128) + `"}`,
			action(func(e *Event) { e.Action = strings.Repeat("a", 128) })},
		{"multibyte user at its limit", "", `{"id":"e2","user":"` + strings.Repeat("é", 128) + `","time":"2026-03-10T23:40:00Z","kind":"action","action":"order"}`,
			action(func(e *Event) { e.User = strings.Repeat("é", 128) })},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			d := NewDecoder(DefaultLimits(), tt.currency)
			got, err := d.Decode([]byte(tt.in))
			if err != nil {
				t.Fatalf("Decode(%s) error: %v", tt.in, err)
			}
			if got != tt.want {
				t.Errorf("Decode(%s)\n got %+v\nwant %+v", tt.in, got, tt.want)
			}
			if got.Time.Location() != time.UTC {
				t.Errorf("time location = %v, want UTC", got.Time.Location())
			}
		})
	}
}

func TestDecodeRejects(t *testing.T) {
	const (
		okTime  = `"time":"2026-03-10T23:40:00Z"`
		touch   = `{"id":"e1","user":"u1",` + okTime + `,"kind":"touch","channel":"newsletter"`
		action  = `{"id":"e2","user":"u1",` + okTime + `,"kind":"action","action":"order"`
		idUser  = `{"id":"e1","user":"u1",`
		kindAct = `"kind":"action","action":"order"}`
	)
	tests := []struct {
		name      string
		lim       Limits
		currency  string
		in        string
		wantWhy   Reason
		wantField string
	}{
		{"payload over the limit", Limits{MaxPayload: 100, MaxID: 128, MaxUser: 256, MaxName: 128}, "",
			action + `,"pad":"` + strings.Repeat("x", 100) + `"}`, ReasonTooLarge, ""},
		{"payload over 64 KiB", DefaultLimits(), "", action + `,"pad":"` + strings.Repeat("x", 64<<10) + `"}`, ReasonTooLarge, ""},

		{"empty payload", DefaultLimits(), "", ``, ReasonBadJSON, ""},
		{"only whitespace", DefaultLimits(), "", " \n", ReasonBadJSON, ""},
		{"array", DefaultLimits(), "", `[` + action + `}]`, ReasonBadJSON, ""},
		{"string", DefaultLimits(), "", `"event"`, ReasonBadJSON, ""},
		{"number", DefaultLimits(), "", `42`, ReasonBadJSON, ""},
		{"null", DefaultLimits(), "", `null`, ReasonBadJSON, ""},
		{"truncated object", DefaultLimits(), "", action, ReasonBadJSON, ""},
		{"two objects", DefaultLimits(), "", action + `}` + action + `}`, ReasonBadJSON, ""},
		{"trailing comma", DefaultLimits(), "", action + `,}`, ReasonBadJSON, ""},
		{"single quotes", DefaultLimits(), "", `{'id':'e1'}`, ReasonBadJSON, ""},
		{"invalid utf-8 in a value", DefaultLimits(), "", `{"id":"e\xff1","user":"u1",` + okTime + `,` + kindAct, ReasonBadJSON, ""},
		{"invalid utf-8 in an unknown field", DefaultLimits(), "", action + `,"x":"\xc3\x28"}`, ReasonBadJSON, ""},
		{"utf-8 encoded surrogate", DefaultLimits(), "", action + `,"x":"\xed\xa0\x80"}`, ReasonBadJSON, ""},
		{"lone high surrogate escape", DefaultLimits(), "", `{"id":"e\ud800","user":"u1",` + okTime + `,` + kindAct, ReasonBadJSON, ""},
		{"lone low surrogate escape", DefaultLimits(), "", action + `,"x":"\udc00"}`, ReasonBadJSON, ""},
		{"high surrogate before a non-surrogate", DefaultLimits(), "", action + `,"x":"\ud800\u0041"}`, ReasonBadJSON, ""},
		{"raw control character in a string", DefaultLimits(), "", action + ",\"x\":\"a\x01b\"}", ReasonBadJSON, ""},
		{"unknown escape", DefaultLimits(), "", action + `,"x":"\q"}`, ReasonBadJSON, ""},
		{"short unicode escape", DefaultLimits(), "", action + `,"x":"\u12"}`, ReasonBadJSON, ""},
		{"NaN literal", DefaultLimits(), "", action + `,"value":NaN}`, ReasonBadJSON, ""},
		{"Infinity literal", DefaultLimits(), "", action + `,"value":Infinity}`, ReasonBadJSON, ""},
		{"leading zero", DefaultLimits(), "", action + `,"value":012}`, ReasonBadJSON, ""},
		{"plus sign", DefaultLimits(), "", action + `,"value":+1}`, ReasonBadJSON, ""},
		{"bare fraction", DefaultLimits(), "", action + `,"value":.5}`, ReasonBadJSON, ""},
		{"nesting one level too deep", DefaultLimits(), "", action + `,"deep":` + nested(maxDepth-1) + `}`, ReasonBadJSON, ""},
		{"nesting 10000 levels deep", DefaultLimits(), "", action + `,"deep":` + nested(10000) + `}`, ReasonBadJSON, ""},

		{"duplicate id", DefaultLimits(), "", action + `,"id":"e3"}`, ReasonBadField, "id"},
		{"duplicate value", DefaultLimits(), "", action + `,"value":1,"value":2}`, ReasonBadField, "value"},

		{"id absent", DefaultLimits(), "", `{"user":"u1",` + okTime + `,` + kindAct, ReasonMissingField, "id"},
		{"id null", DefaultLimits(), "", `{"id":null,"user":"u1",` + okTime + `,` + kindAct, ReasonMissingField, "id"},
		{"id empty", DefaultLimits(), "", `{"id":"","user":"u1",` + okTime + `,` + kindAct, ReasonMissingField, "id"},
		{"user absent", DefaultLimits(), "", `{"id":"e1",` + okTime + `,` + kindAct, ReasonMissingField, "user"},
		{"user empty", DefaultLimits(), "", `{"id":"e1","user":"",` + okTime + `,` + kindAct, ReasonMissingField, "user"},
		{"time absent", DefaultLimits(), "", idUser + kindAct, ReasonMissingField, "time"},
		{"time null", DefaultLimits(), "", idUser + `"time":null,` + kindAct, ReasonMissingField, "time"},
		{"kind absent", DefaultLimits(), "", idUser + okTime + `,"action":"order"}`, ReasonMissingField, "kind"},
		{"kind empty", DefaultLimits(), "", idUser + okTime + `,"kind":"","action":"order"}`, ReasonMissingField, "kind"},
		{"channel absent", DefaultLimits(), "", idUser + okTime + `,"kind":"touch"}`, ReasonMissingField, "channel"},
		{"channel empty", DefaultLimits(), "", idUser + okTime + `,"kind":"touch","channel":""}`, ReasonMissingField, "channel"},
		{"action absent", DefaultLimits(), "", idUser + okTime + `,"kind":"action","value":5}`, ReasonMissingField, "action"},
		{"action null", DefaultLimits(), "", idUser + okTime + `,"kind":"action","action":null}`, ReasonMissingField, "action"},
		{"first problem wins: id before time", DefaultLimits(), "", `{"user":"u1","time":"nope",` + kindAct, ReasonMissingField, "id"},

		{"id number", DefaultLimits(), "", `{"id":17,"user":"u1",` + okTime + `,` + kindAct, ReasonBadField, "id"},
		{"user boolean", DefaultLimits(), "", `{"id":"e1","user":true,` + okTime + `,` + kindAct, ReasonBadField, "user"},
		{"time number", DefaultLimits(), "", idUser + `"time":1773186000,` + kindAct, ReasonBadField, "time"},
		{"kind object", DefaultLimits(), "", idUser + okTime + `,"kind":{"k":"touch"},"channel":"a"}`, ReasonBadField, "kind"},
		{"channel array", DefaultLimits(), "", idUser + okTime + `,"kind":"touch","channel":["a"]}`, ReasonBadField, "channel"},
		{"campaign number", DefaultLimits(), "", touch + `,"campaign":3}`, ReasonBadField, "campaign"},
		{"interaction boolean", DefaultLimits(), "", touch + `,"interaction":false}`, ReasonBadField, "interaction"},
		{"action number", DefaultLimits(), "", idUser + okTime + `,"kind":"action","action":1}`, ReasonBadField, "action"},
		{"value string", DefaultLimits(), "", action + `,"value":"12.50"}`, ReasonBadField, "value"},
		{"value boolean", DefaultLimits(), "", action + `,"value":true}`, ReasonBadField, "value"},
		{"value object", DefaultLimits(), "", action + `,"value":{"amount":1}}`, ReasonBadField, "value"},
		{"currency number", DefaultLimits(), "", action + `,"currency":978}`, ReasonBadField, "currency"},
		{"id too long", DefaultLimits(), "", `{"id":"` + strings.Repeat("i", 129) + `","user":"u1",` + okTime + `,` + kindAct, ReasonBadField, "id"},
		{"user too long", DefaultLimits(), "", `{"id":"e1","user":"` + strings.Repeat("u", 257) + `",` + okTime + `,` + kindAct, ReasonBadField, "user"},
		{"user too long in bytes, not runes", DefaultLimits(), "", `{"id":"e1","user":"` + strings.Repeat("é", 129) + `",` + okTime + `,` + kindAct, ReasonBadField, "user"},
		{"channel too long", DefaultLimits(), "", idUser + okTime + `,"kind":"touch","channel":"` + strings.Repeat("c", 129) + `"}`, ReasonBadField, "channel"},
		{"campaign too long", DefaultLimits(), "", touch + `,"campaign":"` + strings.Repeat("c", 129) + `"}`, ReasonBadField, "campaign"},
		{"action too long", DefaultLimits(), "", idUser + okTime + `,"kind":"action","action":"` + strings.Repeat("a", 129) + `"}`, ReasonBadField, "action"},
		{"currency too long", DefaultLimits(), "", action + `,"currency":"` + strings.Repeat("E", 129) + `"}`, ReasonBadField, "currency"},
		{"escaped control character in id", DefaultLimits(), "", `{"id":"e\u00011","user":"u1",` + okTime + `,` + kindAct, ReasonBadField, "id"},
		{"escaped nul in user", DefaultLimits(), "", `{"id":"e1","user":"u\u0000",` + okTime + `,` + kindAct, ReasonBadField, "user"},
		{"store separator 0x1f in channel", DefaultLimits(), "", idUser + okTime + `,"kind":"touch","channel":"a\u001fb"}`, ReasonBadField, "channel"},
		{"newline in campaign", DefaultLimits(), "", touch + `,"campaign":"a\nb"}`, ReasonBadField, "campaign"},
		{"raw DEL in action", DefaultLimits(), "", idUser + okTime + ",\"kind\":\"action\",\"action\":\"buy\x7f\"}", ReasonBadField, "action"},
		{"escaped DEL in currency", DefaultLimits(), "", action + `,"currency":"EU\u007f"}`, ReasonBadField, "currency"},
		// Names beginning with "@" are reserved for the states the tool adds
		// (event.StateEntry, ...); an escaped '@' (\u0040) is the same name.
		{"channel is a reserved state", DefaultLimits(), "", idUser + okTime + `,"kind":"touch","channel":"@entry"}`, ReasonBadField, "channel"},
		{"channel begins with @", DefaultLimits(), "", idUser + okTime + `,"kind":"touch","channel":"@social"}`, ReasonBadField, "channel"},
		{"channel begins with escaped @", DefaultLimits(), "", idUser + okTime + `,"kind":"touch","channel":"\u0040lost"}`, ReasonBadField, "channel"},
		{"campaign begins with @", DefaultLimits(), "", touch + `,"campaign":"@converted"}`, ReasonBadField, "campaign"},
		{"action is a reserved state", DefaultLimits(), "", idUser + okTime + `,"kind":"action","action":"@exit"}`, ReasonBadField, "action"},

		{"time without zone", DefaultLimits(), "", idUser + `"time":"2026-03-10T23:40:00",` + kindAct, ReasonBadTime, "time"},
		{"time with space separator", DefaultLimits(), "", idUser + `"time":"2026-03-10 23:40:00Z",` + kindAct, ReasonBadTime, "time"},
		{"date only", DefaultLimits(), "", idUser + `"time":"2026-03-10",` + kindAct, ReasonBadTime, "time"},
		{"words", DefaultLimits(), "", idUser + `"time":"yesterday",` + kindAct, ReasonBadTime, "time"},
		{"month 13", DefaultLimits(), "", idUser + `"time":"2026-13-10T23:40:00Z",` + kindAct, ReasonBadTime, "time"},
		{"february 30", DefaultLimits(), "", idUser + `"time":"2026-02-30T23:40:00Z",` + kindAct, ReasonBadTime, "time"},
		{"offset without colon", DefaultLimits(), "", idUser + `"time":"2026-03-10T23:40:00+0200",` + kindAct, ReasonBadTime, "time"},
		{"offset hour 24", DefaultLimits(), "", idUser + `"time":"2026-03-10T23:40:00+24:00",` + kindAct, ReasonBadTime, "time"},
		{"offset minute 60", DefaultLimits(), "", idUser + `"time":"2026-03-10T23:40:00+01:60",` + kindAct, ReasonBadTime, "time"},
		{"comma before the fraction", DefaultLimits(), "", idUser + `"time":"2026-03-10T23:40:00,5Z",` + kindAct, ReasonBadTime, "time"},
		{"dot without digits", DefaultLimits(), "", idUser + `"time":"2026-03-10T23:40:00.Z",` + kindAct, ReasonBadTime, "time"},
		{"one-digit hour", DefaultLimits(), "", idUser + `"time":"2026-03-10T3:40:00Z",` + kindAct, ReasonBadTime, "time"},
		{"hour 24", DefaultLimits(), "", idUser + `"time":"2026-03-10T24:00:00Z",` + kindAct, ReasonBadTime, "time"},
		{"leap second", DefaultLimits(), "", idUser + `"time":"2016-12-31T23:59:60Z",` + kindAct, ReasonBadTime, "time"},
		{"lower-case t and z (go's reading)", DefaultLimits(), "", idUser + `"time":"2026-03-10t23:40:00z",` + kindAct, ReasonBadTime, "time"},
		{"trailing text", DefaultLimits(), "", idUser + `"time":"2026-03-10T23:40:00Z ",` + kindAct, ReasonBadTime, "time"},
		{"zone name", DefaultLimits(), "", idUser + `"time":"2026-03-10T23:40:00 UTC",` + kindAct, ReasonBadTime, "time"},
		{"before int64 nanoseconds", DefaultLimits(), "", idUser + `"time":"1600-01-01T00:00:00Z",` + kindAct, ReasonBadTime, "time"},
		{"after int64 nanoseconds", DefaultLimits(), "", idUser + `"time":"2263-01-01T00:00:00Z",` + kindAct, ReasonBadTime, "time"},

		{"kind unknown", DefaultLimits(), "", idUser + okTime + `,"kind":"click","channel":"a"}`, ReasonBadKind, "kind"},
		{"kind capitalised", DefaultLimits(), "", idUser + okTime + `,"kind":"Touch","channel":"a"}`, ReasonBadKind, "kind"},
		{"interaction unknown", DefaultLimits(), "", touch + `,"interaction":"hover"}`, ReasonBadKind, "interaction"},
		{"interaction capitalised", DefaultLimits(), "", touch + `,"interaction":"VIEW"}`, ReasonBadKind, "interaction"},

		{"value negative", DefaultLimits(), "", action + `,"value":-1}`, ReasonBadValue, "value"},
		{"value tiny negative", DefaultLimits(), "", action + `,"value":-0.000001}`, ReasonBadValue, "value"},
		{"value overflows float64", DefaultLimits(), "", action + `,"value":1e400}`, ReasonBadValue, "value"},
		{"value negative overflow", DefaultLimits(), "", action + `,"value":-1e400}`, ReasonBadValue, "value"},
		{"value huge exponent", DefaultLimits(), "", action + `,"value":1e99999999999999999999}`, ReasonBadValue, "value"},
		{"value just above 1e12", DefaultLimits(), "", action + `,"value":1000000000000.0000001}`, ReasonBadValue, "value"},
		{"value 2e12", DefaultLimits(), "", action + `,"value":2e12}`, ReasonBadValue, "value"},
		{"value 1e13", DefaultLimits(), "", action + `,"value":10000000000000}`, ReasonBadValue, "value"},

		{"currency differs", DefaultLimits(), "EUR", action + `,"currency":"USD"}`, ReasonCurrency, "currency"},
		{"currency is case-sensitive", DefaultLimits(), "EUR", action + `,"currency":"eur"}`, ReasonCurrency, "currency"},
		{"touch currency differs", DefaultLimits(), "EUR", touch + `,"currency":"GBP"}`, ReasonCurrency, "currency"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			d := NewDecoder(tt.lim, tt.currency)
			ev, err := d.Decode([]byte(tt.in))
			var rej *RejectError
			if !errors.As(err, &rej) {
				t.Fatalf("Decode(%.200s) = %+v, %v; want a *RejectError", tt.in, ev, err)
			}
			if rej.Reason != tt.wantWhy || rej.Field != tt.wantField {
				t.Errorf("Decode(%.200s): got reason %q field %q (%v), want reason %q field %q",
					tt.in, rej.Reason, rej.Field, rej, tt.wantWhy, tt.wantField)
			}
			if ev != (Event{}) {
				t.Errorf("rejected Decode returned a non-zero event %+v", ev)
			}
			if msg := unquoted(rej.Msg); msg == "" || strings.ToLower(msg) != msg {
				t.Errorf("Msg %q: want a non-empty lowercase message", rej.Msg)
			}
		})
	}
}

// TestDecodeLimitsBoundary checks that a payload of exactly MaxPayload bytes
// is accepted and one byte more is too_large.
func TestDecodeLimitsBoundary(t *testing.T) {
	base := `{"id":"e1","user":"u1","time":"2026-03-10T23:40:00Z","kind":"action","action":"order","pad":""}`
	lim := DefaultLimits()
	atLimit := base[:len(base)-2] + strings.Repeat("x", lim.MaxPayload-len(base)) + `"}`
	tests := []struct {
		name    string
		in      string
		wantErr bool
	}{
		{"exactly the limit", atLimit, false},
		{"one byte over", atLimit + " ", true},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			_, err := NewDecoder(lim, "").Decode([]byte(tt.in))
			var rej *RejectError
			gotErr := errors.As(err, &rej) && rej.Reason == ReasonTooLarge
			if gotErr != tt.wantErr || (!tt.wantErr && err != nil) {
				t.Errorf("len %d: err = %v, want too_large = %v", len(tt.in), err, tt.wantErr)
			}
		})
	}
}

// TestDecodeCopiesStrings checks that an Event keeps its strings after the
// decoder and the input buffer are reused.
func TestDecodeCopiesStrings(t *testing.T) {
	d := NewDecoder(DefaultLimits(), "")
	buf := []byte(`{"id":"first","user":"alice","time":"2026-03-10T23:40:00Z","kind":"touch","channel":"search","campaign":"spring","currency":"EUR"}`)
	first, err := d.Decode(buf)
	if err != nil {
		t.Fatal(err)
	}
	for i := range buf {
		if buf[i] >= 'a' && buf[i] <= 'z' {
			buf[i] = 'z'
		}
	}
	if _, err := d.Decode([]byte(`{"id":"second","user":"bob__","time":"2026-03-10T23:41:00Z","kind":"touch","channel":"social","campaign":"autumn","currency":"USD"}`)); err != nil {
		t.Fatal(err)
	}
	got := [...]string{first.ID, first.User, first.Channel, first.Campaign, first.Currency}
	want := [...]string{"first", "alice", "search", "spring", "EUR"}
	if got != want {
		t.Errorf("first event's strings after reuse = %q, want %q", got, want)
	}
}

func TestRejectErrorText(t *testing.T) {
	tests := []struct {
		in   *RejectError
		want string
	}{
		{&RejectError{Reason: ReasonBadTime, Field: "time", Msg: "is not an rfc 3339 time with a zone"},
			`bad_time: field "time": is not an rfc 3339 time with a zone`},
		{&RejectError{Reason: ReasonTooLarge, Msg: "payload is 9 bytes, limit is 8"},
			`too_large: payload is 9 bytes, limit is 8`},
	}
	for _, tt := range tests {
		if got := tt.in.Error(); got != tt.want {
			t.Errorf("Error() = %q, want %q", got, tt.want)
		}
	}
}

// nested returns depth levels of nested arrays around an object.
func nested(depth int) string {
	return strings.Repeat("[", depth) + `{"k":1}` + strings.Repeat("]", depth)
}

// unquoted drops double-quoted parts (data such as a currency code) from a
// message so that only its prose is checked for case.
func unquoted(msg string) string {
	var b strings.Builder
	in := false
	for _, r := range msg {
		switch {
		case r == '"':
			in = !in
		case !in:
			b.WriteRune(r)
		}
	}
	return strings.TrimFunc(b.String(), unicode.IsSpace)
}

// TestNotJSONSaysSo (issue 9 item 10): input that only starts like a JSON
// literal is reported as not JSON; on the old code "nonsense" was "a json
// null" and "tomato" "a json boolean".
func TestNotJSONSaysSo(t *testing.T) {
	d := NewDecoder(DefaultLimits(), "")
	for in, want := range map[string]string{
		"nonsense":      "payload is not valid json",
		"tomato soup":   "payload is not valid json",
		"false alarm":   "payload is not valid json",
		"null":          "payload is a json null, not an object",
		" true ":        "payload is a json boolean, not an object",
		"[1,2]":         "payload is a json array, not an object",
		`"quoted" text`: "payload is not valid json",
	} {
		_, err := d.Decode([]byte(in))
		var re *RejectError
		if !errors.As(err, &re) || re.Reason != ReasonBadJSON || !strings.Contains(re.Msg, want) {
			t.Errorf("%q: %v, want bad_json %q", in, err, want)
		}
	}
}
