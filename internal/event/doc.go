// Package event defines touchledger's input event and turns raw JSON payloads
// into validated events or rejects with a stable reason.
//
// # Input and output
//
// Decoder.Decode takes one payload: a single JSON object (one bus message, or
// one line of a replay file). It returns an Event or a *RejectError carrying a
// Reason code; it never panics and returns no other error type. The event
// contract (also in the README):
//
//	field        type                 notes
//	id           string               required, ≤ Limits.MaxID bytes (128)
//	user         string               required, ≤ Limits.MaxUser bytes (256)
//	time         string               required, RFC 3339 with Z or an offset
//	kind         "touch" | "action"   required
//	channel      string               touch: required, ≤ Limits.MaxName (128)
//	campaign     string               touch: optional, ≤ Limits.MaxName
//	interaction  "click" | "view"     touch: optional, default click
//	action       string               action: required, ≤ Limits.MaxName
//	value        number               action: optional, 0 ≤ value ≤ 1e12
//	currency     string               optional, ≤ Limits.MaxName, must equal the
//	                                  decoder's currency when both are set
//
// Unknown fields are ignored (but must be valid JSON), and so are the fields
// of the other kind: a touch's "value" is never read. A required field that
// is absent, null or "" is missing_field; null for an optional field means
// absent, and an empty interaction means click. A field of the wrong JSON
// type is bad_field.
//
// # Checks, in order (the first failure is returned)
//
//  1. payload larger than Limits.MaxPayload (64 KiB): too_large
//  2. anything that is not one JSON object by RFC 8259 — invalid UTF-8
//     anywhere, raw control characters in strings, unknown escapes, NaN,
//     leading zeros, trailing data — or an escaped UTF-16 surrogate that is
//     not a high+low pair, or nesting deeper than 64 levels: bad_json, with
//     the byte offset in the message
//  3. a known field that appears twice: bad_field (producers and consumers
//     disagree on which copy wins, so neither is taken)
//  4. id, user, time, kind present and strings: missing_field / bad_field
//  5. id and user within their limits and free of control characters (bytes
//     below 0x20 and 0x7f, also when written as \u escapes; the store uses
//     0x00 and 0x1f as separators): bad_field
//  6. time is an RFC 3339 date-time with Z or an offset, read exactly as
//     time.Parse(time.RFC3339Nano) reads it but without its leniencies (a
//     comma before the fraction, one-digit hours, offsets of 24:00 or more),
//     and within the range of int64 Unix nanoseconds (1677-09-21 to
//     2262-04-11): else bad_time. Stored in UTC.
//  7. kind is "touch" or "action": bad_kind
//  8. touch: channel (required), campaign, interaction ("click" or "view",
//     else bad_kind); action: action (required), value (not a number:
//     bad_field; negative or above 1e12: bad_value, so 1e400 is bad_value).
//     Length and control-character rules as in 5. A channel, campaign or
//     action beginning with "@" is bad_field: names with that prefix are
//     reserved for the states touchledger adds (@entry, @converted, @lost,
//     @exit), so a transition or path never confuses a name with a state.
//  9. currency: a string within the name limit, free of control characters;
//     when the decoder has a currency and the event names a different one
//     (case-sensitive): currency
//
// # Values
//
// value is kept as int64 micro-units (ValueScale = 10^6 per currency unit) so
// that sums are exact and associative. The conversion reads the decimal text
// of the JSON number exactly and rounds half away from zero at the seventh
// decimal:
//
//	Value = round_half_away(v × 10^6)
//
// This is int64(math.Round(v*1e6)) on the float64 of v for every value with
// at most six decimals below 2^51 micro-units (about 2.25e9 currency units);
// above that the float product can be a micro-unit off, and this stays exact.
// Fixed-point money in micro-units is common practice. Consequently an event
// re-encoded with Value/10^6 written in full decimals decodes to the same
// Value.
//
// # Invariants of an accepted Event
//
// ID, User and, by kind, Channel or Action are non-empty, valid UTF-8, within
// their limits and free of control characters; Time is UTC with an exact
// UnixNano; 0 ≤ Value ≤ 10^18 and Value is 0 when HasValue is false; a touch
// has no action fields and an action no touch fields; the strings are owned
// by the Event (one allocation holds them all, so a kept field keeps its
// event's few hundred bytes alive).
//
// # Speed
//
// The decoder reads the payload once, checking every byte as it goes (eight
// bytes at a time inside strings), and allocates once per accepted event. It
// keeps scratch state between calls, so it is not safe for concurrent use:
// give each goroutine its own. BenchmarkDecode reports the rate in events/s.
package event
