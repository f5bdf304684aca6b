// Package event defines touchledger's input event and turns raw JSON payloads
// into validated events or rejects with a stable reason.
//
// # Input and output
//
// Decoder.Decode takes one payload: a single JSON object (one bus message, or
// one line of a replay file). It returns an Event or a *RejectError carrying a
// Reason code; it never panics and returns no other error type. The event
// contract is in DESIGN.md ("Events"):
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
// Unknown fields are ignored, and so are the fields of the other kind (a
// touch's "value" is never read). A required field that is absent, null or ""
// is missing_field; null for an optional field means absent, and an empty
// interaction means click. A field of the wrong JSON type is bad_field.
//
// # Checks, in order (the first failure is returned)
//
//  1. payload larger than Limits.MaxPayload (64 KiB): too_large
//  2. invalid UTF-8 anywhere, JSON that breaks RFC 8259 (fastjson.Validate:
//     no NaN, no leading zeros, no raw control characters in strings), an
//     escaped UTF-16 surrogate that is not a high+low pair, or a payload
//     that is not an object: bad_json
//  3. a known field that appears twice: bad_field (producers and consumers
//     disagree on which copy wins, so neither is taken)
//  4. id, user, time, kind present and strings: missing_field / bad_field
//  5. id and user within their limits and free of control characters (bytes
//     below 0x20 and 0x7f, also when written as \u escapes; the store uses
//     0x00 and 0x1f as separators): bad_field
//  6. time parses with time.RFC3339Nano and lies within the range of int64
//     Unix nanoseconds (1677-09-21 to 2262-04-11): bad_time. Stored in UTC.
//  7. kind is "touch" or "action": bad_kind
//  8. touch: channel, campaign, interaction; action: action, value (a
//     non-number is bad_field; a negative, non-finite or > 1e12 number is
//     bad_value, so 1e400 is bad_value)
//  9. currency: a string within the name limit, free of control characters;
//     when the decoder has a currency and the event names a different one
//     (case-sensitive): currency
//
// # Values
//
// value is kept as int64 micro-units (ValueScale = 10^6 per currency unit) so
// that sums are exact and associative. The conversion reads the decimal text
// of the JSON number directly and rounds half away from zero at the seventh
// decimal:
//
//	Value = round_half_away(v × 10^6)
//
// which is int64(math.Round(v*1e6)) on the float64 of v wherever float64 holds
// the digits (common practice for money: fixed-point micro-units), and stays
// exact above 2^52 micro-units where the float product would not. An event
// re-encoded with Value/10^6 written in full decimals decodes to the same
// Value.
//
// # Invariants of an accepted Event
//
// ID, User and, by kind, Channel or Action are non-empty, valid UTF-8, within
// their limits and free of control characters; Time is UTC with an exact
// UnixNano; 0 ≤ Value ≤ 10^18 and Value is 0 when HasValue is false; the
// strings are owned by the Event (one allocation holds them all).
//
// # Speed
//
// A Decoder reuses one fastjson.Parser and its buffers, so it is not safe for
// concurrent use: give each goroutine its own. BenchmarkDecode reports the
// rate in events/s.
package event
