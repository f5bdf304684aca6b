package event

import (
	"bytes"
	"fmt"
	"time"
	"unsafe"
)

// Limits bounds the size of an input event. All sizes are in bytes.
type Limits struct {
	MaxPayload int // whole payload
	MaxID      int // id
	MaxUser    int // user
	MaxName    int // channel, campaign, action and currency, each
}

// DefaultLimits returns the documented limits: payload 64 KiB, id 128 bytes,
// user 256 bytes, channel/campaign/action/currency 128 bytes each.
func DefaultLimits() Limits {
	return Limits{MaxPayload: 64 << 10, MaxID: 128, MaxUser: 256, MaxName: 128}
}

// MaxValue is the largest accepted event value, in currency units.
const MaxValue = 1e12

// maxMicro is MaxValue in micro-units.
const maxMicro = int64(MaxValue) * ValueScale

// earliest and latest bound an event's time: the instants that int64
// nanoseconds since 1970-01-01 UTC can hold, so that every accepted time has an
// exact Time.UnixNano.
var (
	earliest = time.Unix(0, -1<<63).UTC()
	latest   = time.Unix(0, 1<<63-1).UTC()
)

// field numbers the JSON fields the decoder reads.
type field uint8

const (
	fieldID field = iota
	fieldUser
	fieldTime
	fieldKind
	fieldChannel
	fieldCampaign
	fieldInteraction
	fieldAction
	fieldValue
	fieldCurrency
	numFields
)

var fieldNames = [numFields]string{"id", "user", "time", "kind", "channel", "campaign",
	"interaction", "action", "value", "currency"}

// noField marks "no duplicate seen" in Decoder.duplicate.
const noField = numFields

// Decoder decodes and validates one JSON event. Not safe for concurrent use
// (it reuses its buffers between calls).
type Decoder struct {
	lim      Limits
	currency string

	members   [numFields]member // the known fields of the current payload
	duplicate field             // first known field seen twice, or noField
	key       []byte            // an object key with escapes, unescaped
}

// NewDecoder returns a decoder that enforces lim and, when currency is not
// empty, rejects events whose non-empty currency differs from it. currency ""
// accepts any currency. Limits are taken as given; config.Validate checks them.
func NewDecoder(lim Limits, currency string) *Decoder {
	return &Decoder{lim: lim, currency: currency}
}

// Decode returns the event or a *RejectError (never panics, never another
// error type). The returned Event owns its strings; b is not retained.
//
// Checks run in this order: size, JSON syntax and UTF-8, object shape,
// duplicate known fields, required id/user/time/kind, id and user limits,
// time, kind, the kind's own fields, currency. The first failure is returned.
func (d *Decoder) Decode(b []byte) (Event, error) {
	if len(b) > d.lim.MaxPayload {
		return Event{}, reject(ReasonTooLarge, "", fmt.Sprintf("payload is %d bytes, limit is %d", len(b), d.lim.MaxPayload))
	}
	if rej := d.scanEvent(b); rej != nil {
		return Event{}, rej
	}
	if d.duplicate != noField {
		return Event{}, rejectField(ReasonBadField, d.duplicate, "appears more than once")
	}
	return d.event(b)
}

// scanEvent checks that b is one JSON object and records where its known
// fields lie in d.members.
func (d *Decoder) scanEvent(b []byte) *RejectError {
	d.members = [numFields]member{}
	d.duplicate = noField
	i := skipSpace(b, 0)
	if c := peek(b, i); c != '{' {
		if i >= len(b) {
			return reject(ReasonBadJSON, "", "payload is empty")
		}
		end, typ, bad := scanValue(b, i, 1)
		switch {
		case typ == absent:
			return reject(ReasonBadJSON, "", unexpected(b, i, "'{'").message())
		case bad.what != "":
			// "nonsense" or "tomato" start like null or true: not JSON at all.
			return reject(ReasonBadJSON, "", bad.message())
		case skipSpace(b, end) < len(b):
			return reject(ReasonBadJSON, "", unexpected(b, skipSpace(b, end), "the end of the payload").message())
		}
		return reject(ReasonBadJSON, "", "payload is a json "+typ.String()+", not an object")
	}
	i = skipSpace(b, i+1)
	if peek(b, i) == '}' {
		i++
	} else {
		for {
			if peek(b, i) != '"' {
				return badJSON(unexpected(b, i, "a string key"))
			}
			keyStart := i + 1
			end, flags, bad := scanString(b, keyStart)
			if bad.what != "" {
				return badJSON(bad)
			}
			key := b[keyStart : end-1]
			if flags&escapedString != 0 {
				d.key = unescape(d.key[:0], key)
				key = d.key
			}
			i = skipSpace(b, end)
			if peek(b, i) != ':' {
				return badJSON(unexpected(b, i, "':'"))
			}
			i = skipSpace(b, i+1)
			f := fieldOf(key)
			var m member
			if peek(b, i) == '"' {
				m = member{typ: typeString, start: i + 1}
				i, m.flags, bad = scanString(b, i+1)
				m.end = i - 1
			} else {
				m.start = i
				i, m.typ, bad = scanValue(b, i, 1)
				m.end = i
			}
			if bad.what != "" {
				return badJSON(bad)
			}
			if f != noField {
				if d.members[f].typ == absent {
					d.members[f] = m
				} else if d.duplicate == noField {
					d.duplicate = f
				}
			}
			i = skipSpace(b, i)
			if c := peek(b, i); c == ',' {
				i = skipSpace(b, i+1)
				continue
			} else if c == '}' {
				i++
				break
			}
			return badJSON(unexpected(b, i, "',' or '}'"))
		}
	}
	if i = skipSpace(b, i); i != len(b) {
		return badJSON(syntaxError{at: i, what: "data after the object"})
	}
	return nil
}

// fieldOf returns the known field named key, or noField.
func fieldOf(key []byte) field {
	switch string(key) {
	case "id":
		return fieldID
	case "user":
		return fieldUser
	case "time":
		return fieldTime
	case "kind":
		return fieldKind
	case "channel":
		return fieldChannel
	case "campaign":
		return fieldCampaign
	case "interaction":
		return fieldInteraction
	case "action":
		return fieldAction
	case "value":
		return fieldValue
	case "currency":
		return fieldCurrency
	}
	return noField
}

// event validates the recorded fields of b and builds the Event. Every
// error it returns is a non-nil *RejectError.
func (d *Decoder) event(b []byte) (Event, error) {
	var (
		raw [numFields][]byte // validated string fields
		rej *RejectError
	)
	for _, f := range [...]field{fieldID, fieldUser, fieldTime, fieldKind} {
		if raw[f], rej = d.requiredString(b, f); rej != nil {
			return Event{}, rej
		}
	}
	if rej = d.checkName(fieldID, raw[fieldID], d.lim.MaxID); rej != nil {
		return Event{}, rej
	}
	if rej = d.checkName(fieldUser, raw[fieldUser], d.lim.MaxUser); rej != nil {
		return Event{}, rej
	}
	at, rej := parseTime(raw[fieldTime])
	if rej != nil {
		return Event{}, rej
	}

	ev := Event{Time: at}
	switch string(raw[fieldKind]) {
	case "touch":
		ev.Kind = Touch
		if raw[fieldChannel], rej = d.requiredString(b, fieldChannel); rej != nil {
			return Event{}, rej
		}
		if rej = d.checkName(fieldChannel, raw[fieldChannel], d.lim.MaxName); rej != nil {
			return Event{}, rej
		}
		if rej = checkUnreserved(fieldChannel, raw[fieldChannel]); rej != nil {
			return Event{}, rej
		}
		if raw[fieldCampaign], rej = d.optionalString(b, fieldCampaign); rej != nil {
			return Event{}, rej
		}
		if rej = d.checkName(fieldCampaign, raw[fieldCampaign], d.lim.MaxName); rej != nil {
			return Event{}, rej
		}
		if rej = checkUnreserved(fieldCampaign, raw[fieldCampaign]); rej != nil {
			return Event{}, rej
		}
		interaction, rej := d.optionalString(b, fieldInteraction)
		if rej != nil {
			return Event{}, rej
		}
		switch string(interaction) {
		case "", "click":
			ev.Interaction = Click
		case "view":
			ev.Interaction = View
		default:
			return Event{}, rejectField(ReasonBadKind, fieldInteraction, `must be "click" or "view"`)
		}
	case "action":
		ev.Kind = Action
		if raw[fieldAction], rej = d.requiredString(b, fieldAction); rej != nil {
			return Event{}, rej
		}
		if rej = d.checkName(fieldAction, raw[fieldAction], d.lim.MaxName); rej != nil {
			return Event{}, rej
		}
		if rej = checkUnreserved(fieldAction, raw[fieldAction]); rej != nil {
			return Event{}, rej
		}
		if ev.Value, ev.HasValue, rej = d.value(b); rej != nil {
			return Event{}, rej
		}
	default:
		return Event{}, rejectField(ReasonBadKind, fieldKind, `must be "touch" or "action"`)
	}

	if raw[fieldCurrency], rej = d.optionalString(b, fieldCurrency); rej != nil {
		return Event{}, rej
	}
	if rej = d.checkName(fieldCurrency, raw[fieldCurrency], d.lim.MaxName); rej != nil {
		return Event{}, rej
	}
	sameCurrency := len(raw[fieldCurrency]) > 0 && string(raw[fieldCurrency]) == d.currency
	if d.currency != "" && len(raw[fieldCurrency]) > 0 && !sameCurrency {
		return Event{}, rejectField(ReasonCurrency, fieldCurrency,
			fmt.Sprintf("is %q, the configured currency is %q", raw[fieldCurrency], d.currency))
	}

	// One allocation holds every string of the event.
	n := len(raw[fieldID]) + len(raw[fieldUser]) + len(raw[fieldChannel]) + len(raw[fieldCampaign]) + len(raw[fieldAction])
	if !sameCurrency {
		n += len(raw[fieldCurrency])
	}
	buf := make([]byte, 0, n)
	buf = append(buf, raw[fieldID]...)
	buf = append(buf, raw[fieldUser]...)
	buf = append(buf, raw[fieldChannel]...)
	buf = append(buf, raw[fieldCampaign]...)
	buf = append(buf, raw[fieldAction]...)
	if !sameCurrency {
		buf = append(buf, raw[fieldCurrency]...)
	}
	// buf is never written again, so the string may share its memory (the
	// same step strings.Builder.String takes).
	rest := unsafe.String(unsafe.SliceData(buf), len(buf))
	next := func(f field) string {
		s := rest[:len(raw[f])]
		rest = rest[len(raw[f]):]
		return s
	}
	ev.ID = next(fieldID)
	ev.User = next(fieldUser)
	ev.Channel = next(fieldChannel)
	ev.Campaign = next(fieldCampaign)
	ev.Action = next(fieldAction)
	if sameCurrency {
		ev.Currency = d.currency
	} else {
		ev.Currency = next(fieldCurrency)
	}
	return ev, nil
}

// requiredString returns the text of a required string field: absent, null
// or "" is missing_field, another JSON type is bad_field.
func (d *Decoder) requiredString(b []byte, f field) ([]byte, *RejectError) {
	m := d.members[f]
	switch m.typ {
	case absent:
		return nil, rejectField(ReasonMissingField, f, "is absent")
	case typeNull:
		return nil, rejectField(ReasonMissingField, f, "is null")
	case typeString:
		if m.end == m.start {
			return nil, rejectField(ReasonMissingField, f, "is empty")
		}
		return d.text(b, m), nil
	}
	return nil, rejectField(ReasonBadField, f, "must be a string, got "+m.typ.String())
}

// optionalString returns the text of an optional string field; absent or
// null gives nil, another JSON type is bad_field.
func (d *Decoder) optionalString(b []byte, f field) ([]byte, *RejectError) {
	m := d.members[f]
	switch m.typ {
	case absent, typeNull:
		return nil, nil
	case typeString:
		return d.text(b, m), nil
	}
	return nil, rejectField(ReasonBadField, f, "must be a string, got "+m.typ.String())
}

// text returns a string member's text, unescaped when needed (a rare case
// that costs an allocation).
func (d *Decoder) text(b []byte, m member) []byte {
	s := b[m.start:m.end]
	if m.flags&escapedString != 0 {
		return unescape(make([]byte, 0, len(s)), s)
	}
	return s
}

// value reads the optional value field of an action in micro-units.
func (d *Decoder) value(b []byte) (micro int64, has bool, rej *RejectError) {
	m := d.members[fieldValue]
	switch m.typ {
	case absent, typeNull:
		return 0, false, nil
	case typeNumber:
	default:
		return 0, false, rejectField(ReasonBadField, fieldValue, "must be a number, got "+m.typ.String())
	}
	micro, ok := microUnits(b[m.start:m.end])
	if !ok {
		return 0, false, rejectField(ReasonBadValue, fieldValue, "must be a number from 0 to 1e12")
	}
	return micro, true, nil
}

// checkName enforces a string field's length limit and bans control
// characters (C0 and DEL): the store uses 0x00 and 0x1f as separators. Raw
// C0 bytes are already bad JSON, so only strings flagged by scanString (with
// escapes or a raw DEL) need a look at every byte.
func (d *Decoder) checkName(f field, s []byte, limit int) *RejectError {
	if len(s) > limit {
		return rejectField(ReasonBadField, f, fmt.Sprintf("is %d bytes, limit is %d", len(s), limit))
	}
	if d.members[f].flags == 0 {
		return nil
	}
	for _, c := range s {
		if c < 0x20 || c == 0x7f {
			return rejectField(ReasonBadField, f, fmt.Sprintf("holds control character 0x%02x", c))
		}
	}
	return nil
}

// checkUnreserved rejects a name that begins with ReservedPrefix: those
// names are the states the tool adds (StateEntry, StateConverted, ...).
func checkUnreserved(f field, s []byte) *RejectError {
	if len(s) > 0 && s[0] == ReservedPrefix[0] {
		return rejectField(ReasonBadField, f, fmt.Sprintf("begins with %q, which is reserved for the states touchledger adds (%s, %s, %s, %s)",
			ReservedPrefix, StateEntry, StateConverted, StateLost, StateExit))
	}
	return nil
}

// parseTime parses an RFC 3339 time with a zone (Z or an offset) and returns
// it in UTC.
func parseTime(s []byte) (time.Time, *RejectError) {
	t, ok := parseRFC3339(s)
	if !ok {
		return time.Time{}, rejectField(ReasonBadTime, fieldTime, "is not an rfc 3339 time with a zone")
	}
	if t.Before(earliest) || t.After(latest) {
		return time.Time{}, rejectField(ReasonBadTime, fieldTime, "is outside 1677-09-21 to 2262-04-11 (int64 unix nanoseconds)")
	}
	return t, nil
}

// parseRFC3339 reads an RFC 3339 date-time (section 5.6):
// "2006-01-02T15:04:05", an optional "." and digits, then "Z" or "+hh:mm" /
// "-hh:mm" with hh ≤ 23 and mm ≤ 59. It gives the same instant as
// time.Parse(time.RFC3339Nano, s) on every input both accept (the tests
// compare them): upper-case T and Z only, no leap second, fraction digits
// after the ninth ignored. It is stricter than time.Parse, which also takes
// a comma before the fraction, one-digit hours and offsets up to 24:00, and
// it never consults the machine's local zone.
func parseRFC3339(s []byte) (time.Time, bool) {
	if len(s) < len("2006-01-02T15:04:05Z") ||
		s[4] != '-' || s[7] != '-' || s[10] != 'T' || s[13] != ':' || s[16] != ':' {
		return time.Time{}, false
	}
	century, year2 := digits2(s, 0), digits2(s, 2)
	month, day := digits2(s, 5), digits2(s, 8)
	hour, minute, second := digits2(s, 11), digits2(s, 14), digits2(s, 17)
	if century < 0 || year2 < 0 || hour < 0 || hour > 23 || minute < 0 || minute > 59 || second < 0 || second > 59 {
		return time.Time{}, false
	}
	year := century*100 + year2
	if month < 1 || month > 12 || day < 1 || day > daysIn(year, month) {
		return time.Time{}, false
	}
	rest := s[19:]
	nsec := 0
	if rest[0] == '.' {
		n := 1
		for ; n < len(rest) && rest[n] >= '0' && rest[n] <= '9'; n++ {
			if n <= 9 {
				nsec = nsec*10 + int(rest[n]-'0')
			}
		}
		if n == 1 {
			return time.Time{}, false
		}
		for k := n; k <= 9; k++ {
			nsec *= 10
		}
		rest = rest[n:]
	}
	offset := 0
	switch {
	case len(rest) == 1 && rest[0] == 'Z':
	case len(rest) == 6 && (rest[0] == '+' || rest[0] == '-') && rest[3] == ':':
		hh, mm := digits2(rest, 1), digits2(rest, 4)
		if hh < 0 || hh > 23 || mm < 0 || mm > 59 {
			return time.Time{}, false
		}
		offset = (hh*60 + mm) * 60
		if rest[0] == '-' {
			offset = -offset
		}
	default:
		return time.Time{}, false
	}
	secs := daysSinceEpoch(year, month, day)*86400 + int64(hour*3600+minute*60+second-offset)
	return time.Unix(secs, int64(nsec)).UTC(), true
}

// digits2 returns the two-digit number at s[i:], or -1.
func digits2(s []byte, i int) int {
	a, b := s[i]-'0', s[i+1]-'0' // wraps around for bytes below '0'
	if a > 9 || b > 9 {
		return -1
	}
	return int(a)*10 + int(b)
}

// daysIn returns the number of days in month of year (proleptic Gregorian).
func daysIn(year, month int) int {
	switch month {
	case 2:
		if year%4 == 0 && (year%100 != 0 || year%400 == 0) {
			return 29
		}
		return 28
	case 4, 6, 9, 11:
		return 30
	}
	return 31
}

// daysSinceEpoch returns the days from 1970-01-01 to the date (proleptic
// Gregorian, year ≥ 0). Formula: Hinnant, "chrono-Compatible Low-Level Date
// Algorithms", days_from_civil (howardhinnant.github.io/date_algorithms.html,
// from memory; the tests compare it with the time package).
func daysSinceEpoch(year, month, day int) int64 {
	if month <= 2 {
		year--
	}
	era := year / 400
	if year < 0 {
		era = (year - 399) / 400
	}
	yearOfEra := year - era*400                                         // [0, 399]
	shifted := (month + 9) % 12                                         // March = 0 … February = 11
	dayOfYear := (153*shifted+2)/5 + day - 1                            // [0, 365]
	dayOfEra := yearOfEra*365 + yearOfEra/4 - yearOfEra/100 + dayOfYear // [0, 146096]
	return int64(era)*146097 + int64(dayOfEra) - 719468
}

// microUnits converts the text of a JSON number (RFC 8259 grammar, already
// checked) to micro-units, exactly from its decimal digits, rounding half away
// from zero at the seventh decimal. This equals int64(math.Round(v*1e6)) on
// the float64 v of the text for every value with at most six decimals below
// 2^51 micro-units (about 2.25e9 currency units); beyond that, and on exact
// ties at the seventh decimal, the float product can be one micro-unit off
// and this stays exact. ok is false for a value below 0 or above MaxValue;
// negative zero is 0.
func microUnits(num []byte) (micro int64, ok bool) {
	negative := num[0] == '-'
	if negative {
		num = num[1:]
	}
	// num = intPart [. fracPart] [e|E [sign] exp]
	end := len(num)
	expStart := bytes.IndexAny(num, "eE")
	if expStart >= 0 {
		end = expStart
	}
	mantissa := num[:end]
	intPart, fracPart := mantissa, []byte(nil)
	if dot := bytes.IndexByte(mantissa, '.'); dot >= 0 {
		intPart, fracPart = mantissa[:dot], mantissa[dot+1:]
	}
	digit := func(k int) byte { // k-th digit of intPart ++ fracPart
		if k < len(intPart) {
			return intPart[k]
		}
		return fracPart[k-len(intPart)]
	}
	count := len(intPart) + len(fracPart)
	lead := 0
	for lead < count && digit(lead) == '0' {
		lead++
	}
	if lead == count {
		return 0, true // zero, whatever its sign or exponent
	}
	if negative {
		return 0, false
	}

	exp := 0
	if expStart >= 0 {
		e := num[expStart+1:]
		expNegative := e[0] == '-'
		if e[0] == '-' || e[0] == '+' {
			e = e[1:]
		}
		for _, c := range e {
			if exp < 1e8 { // saturate: beyond this the answer no longer changes
				exp = exp*10 + int(c-'0')
			}
		}
		if expNegative {
			exp = -exp
		}
	}
	// The value is 0.D × 10^point, D the significant digits digit(lead..).
	point := len(intPart) - lead + exp
	const maxPoint = 13 // 10^12 has 13 integer digits
	switch {
	case point > maxPoint:
		return 0, false
	case point == maxPoint: // only 1e12 itself fits
		if digit(lead) != '1' {
			return 0, false
		}
		for k := lead + 1; k < count; k++ {
			if digit(k) != '0' {
				return 0, false
			}
		}
		return maxMicro, true
	}
	n := point + 6 // digits left of the micro-unit point
	for k := 0; k < n; k++ {
		micro *= 10
		if lead+k < count {
			micro += int64(digit(lead+k) - '0')
		}
	}
	if n >= 0 && lead+n < count && digit(lead+n) >= '5' {
		micro++
	}
	return micro, true
}

func badJSON(e syntaxError) *RejectError {
	return reject(ReasonBadJSON, "", e.message())
}

func reject(r Reason, field, msg string) *RejectError {
	return &RejectError{Reason: r, Field: field, Msg: msg}
}

func rejectField(r Reason, f field, msg string) *RejectError {
	return &RejectError{Reason: r, Field: fieldNames[f], Msg: msg}
}
