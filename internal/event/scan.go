package event

import (
	"encoding/binary"
	"fmt"
	"math/bits"
	"unicode/utf16"
	"unicode/utf8"
)

// This file reads JSON (RFC 8259) in one pass over the payload: structure,
// string escapes, UTF-8, number grammar and literal spelling are all checked,
// including inside fields the decoder ignores. Escaped UTF-16 surrogates must
// come as high+low pairs.

// maxDepth bounds the nesting of arrays and objects, counting the event
// object itself as level 1.
const maxDepth = 64

// valueType is the JSON type of a member the decoder reads.
type valueType uint8

const (
	absent valueType = iota
	typeNull
	typeString
	typeNumber
	typeBoolean
	typeObject
	typeArray
)

func (t valueType) String() string {
	return [...]string{"absent", "null", "string", "number", "boolean", "object", "array"}[t]
}

// member is where a known field's value lies in the payload.
type member struct {
	typ        valueType
	flags      uint8 // a string's flags from scanString
	start, end int   // string content without quotes, or number text
}

// syntaxError says where and why a payload is not valid JSON. The zero value
// means no error.
type syntaxError struct {
	at   int
	what string
}

func (e syntaxError) message() string {
	return fmt.Sprintf("payload is not valid json: %s at byte %d", e.what, e.at)
}

// plain marks the string bytes that need no attention: printable ASCII other
// than '"', '\\' and DEL.
var plain = func() (t [256]bool) {
	for c := 0x20; c < 0x7f; c++ {
		t[c] = c != '"' && c != '\\'
	}
	return t
}()

const (
	ones  = 0x0101010101010101
	highs = 0x8080808080808080
)

// specialBytes flags (in bit 7 of each byte) the bytes of x, eight string
// bytes in little-endian order, that are not plain. Above the lowest flagged
// byte, flags may be false positives (borrows), so only the lowest is used.
// Method: the zero-byte and less-than tests of Anderson's "Bit Twiddling
// Hacks" (graphics.stanford.edu/~seander/bithacks.html, from memory).
func specialBytes(x uint64) uint64 {
	quote := x ^ (ones * '"')
	backslash := x ^ (ones * '\\')
	return (x-ones*0x20)&^x | // below 0x20
		(quote-ones)&^quote | // '"'
		(backslash-ones)&^backslash | // '\\'
		(x | (x + ones)) // DEL (0x7f+1 sets bit 7) and 0x80 and above
}

// String flags returned by scanString.
const (
	escapedString = 1 << iota // holds escapes: unescape before use, check for control characters
	delString                 // holds a raw DEL (0x7f)
)

// peek returns b[i], or 0 past the end (0 is never valid where peek is used).
func peek(b []byte, i int) byte {
	if i < len(b) {
		return b[i]
	}
	return 0
}

func skipSpace(b []byte, i int) int {
	for i < len(b) {
		switch b[i] {
		case ' ', '\t', '\n', '\r':
			i++
		default:
			return i
		}
	}
	return i
}

// unexpected describes the byte at i for an error.
func unexpected(b []byte, i int, want string) syntaxError {
	if i >= len(b) {
		return syntaxError{at: i, what: "unexpected end, want " + want}
	}
	return syntaxError{at: i, what: fmt.Sprintf("unexpected %q, want %s", string(b[i]), want)}
}

// scanString checks the string whose content starts at i (just after the
// opening quote) and returns the index after the closing quote and its flags.
func scanString(b []byte, i int) (end int, flags uint8, bad syntaxError) {
	for {
		// Skip plain bytes eight at a time, then one at a time near the end.
		for i+8 <= len(b) {
			if m := specialBytes(binary.LittleEndian.Uint64(b[i:])) & highs; m != 0 {
				i += bits.TrailingZeros64(m) / 8
				goto special
			}
			i += 8
		}
		for i < len(b) && plain[b[i]] {
			i++
		}
		if i >= len(b) {
			return i, flags, syntaxError{at: i, what: "unterminated string"}
		}
	special:
		switch c := b[i]; {
		case c == '"':
			return i + 1, flags, syntaxError{}
		case c == '\\':
			flags |= escapedString
			n, bad := escapeLen(b, i)
			if bad.what != "" {
				return i, flags, bad
			}
			i += n
		case c == 0x7f:
			flags |= delString
			i++
		case c < 0x20:
			return i, flags, syntaxError{at: i, what: fmt.Sprintf("control character 0x%02x in a string", c)}
		default: // c >= 0x80
			r, size := utf8.DecodeRune(b[i:])
			if r == utf8.RuneError && size == 1 {
				return i, flags, syntaxError{at: i, what: "invalid utf-8"}
			}
			i += size
		}
	}
}

// escapeLen checks the escape at b[i] == '\\' and returns its length: 2, 6
// for a \u escape with four hex digits, or 12 for an escaped surrogate pair.
func escapeLen(b []byte, i int) (int, syntaxError) {
	switch peek(b, i+1) {
	case '"', '\\', '/', 'b', 'f', 'n', 'r', 't':
		return 2, syntaxError{}
	case 'u':
	default:
		return 0, syntaxError{at: i, what: "invalid escape"}
	}
	r := hex4(b, i+2)
	switch {
	case r < 0:
		return 0, syntaxError{at: i, what: `invalid \u escape`}
	case utf16.IsSurrogate(rune(r)) && r < 0xdc00: // high surrogate
		if peek(b, i+6) == '\\' && peek(b, i+7) == 'u' {
			if low := hex4(b, i+8); low >= 0xdc00 && low <= 0xdfff {
				return 12, syntaxError{}
			}
		}
		return 0, syntaxError{at: i, what: "unpaired utf-16 surrogate escape"}
	case utf16.IsSurrogate(rune(r)): // low surrogate first
		return 0, syntaxError{at: i, what: "unpaired utf-16 surrogate escape"}
	}
	return 6, syntaxError{}
}

// hex4 parses four hex digits at b[i:], or returns -1.
func hex4(b []byte, i int) int {
	if i+4 > len(b) {
		return -1
	}
	n := 0
	for _, c := range b[i : i+4] {
		switch {
		case c >= '0' && c <= '9':
			c -= '0'
		case c >= 'a' && c <= 'f':
			c -= 'a' - 10
		case c >= 'A' && c <= 'F':
			c -= 'A' - 10
		default:
			return -1
		}
		n = n<<4 | int(c)
	}
	return n
}

// unescape appends the text of a checked string with escapes to dst.
func unescape(dst, s []byte) []byte {
	for i := 0; i < len(s); {
		c := s[i]
		if c != '\\' {
			dst = append(dst, c)
			i++
			continue
		}
		switch s[i+1] {
		case 'b':
			dst = append(dst, '\b')
		case 'f':
			dst = append(dst, '\f')
		case 'n':
			dst = append(dst, '\n')
		case 'r':
			dst = append(dst, '\r')
		case 't':
			dst = append(dst, '\t')
		case 'u':
			r := rune(hex4(s, i+2))
			if utf16.IsSurrogate(r) {
				r = utf16.DecodeRune(r, rune(hex4(s, i+8)))
				i += 6
			}
			dst = utf8.AppendRune(dst, r)
			i += 6
			continue
		default: // '"', '\\', '/'
			dst = append(dst, s[i+1])
		}
		i += 2
	}
	return dst
}

// scanNumber checks the number starting at i against the JSON grammar
// -?(0|[1-9][0-9]*)(\.[0-9]+)?([eE][+-]?[0-9]+)? and returns its end.
func scanNumber(b []byte, i int) (int, syntaxError) {
	start := i
	if peek(b, i) == '-' {
		i++
	}
	switch c := peek(b, i); {
	case c == '0':
		i++
	case c >= '1' && c <= '9':
		i = skipDigits(b, i+1)
	default:
		return i, syntaxError{at: start, what: "malformed number"}
	}
	if peek(b, i) == '.' {
		j := skipDigits(b, i+1)
		if j == i+1 {
			return i, syntaxError{at: start, what: "malformed number"}
		}
		i = j
	}
	if c := peek(b, i); c == 'e' || c == 'E' {
		i++
		if c := peek(b, i); c == '+' || c == '-' {
			i++
		}
		j := skipDigits(b, i)
		if j == i {
			return i, syntaxError{at: start, what: "malformed number"}
		}
		i = j
	}
	return i, syntaxError{}
}

func skipDigits(b []byte, i int) int {
	for i < len(b) && b[i] >= '0' && b[i] <= '9' {
		i++
	}
	return i
}

// scanLiteral checks that word (true, false or null) is at i.
func scanLiteral(b []byte, i int, word string) (int, syntaxError) {
	if len(b)-i < len(word) || string(b[i:i+len(word)]) != word {
		return i, syntaxError{at: i, what: "unknown literal, want true, false or null"}
	}
	return i + len(word), syntaxError{}
}

// scanValue checks the value at i (after white space) at nesting level depth
// and returns its end and type.
func scanValue(b []byte, i, depth int) (int, valueType, syntaxError) {
	var bad syntaxError
	switch c := peek(b, i); c {
	case '"':
		i, _, bad = scanString(b, i+1)
		return i, typeString, bad
	case '{':
		i, bad = scanContainer(b, i, depth+1, '}')
		return i, typeObject, bad
	case '[':
		i, bad = scanContainer(b, i, depth+1, ']')
		return i, typeArray, bad
	case 't':
		i, bad = scanLiteral(b, i, "true")
		return i, typeBoolean, bad
	case 'f':
		i, bad = scanLiteral(b, i, "false")
		return i, typeBoolean, bad
	case 'n':
		i, bad = scanLiteral(b, i, "null")
		return i, typeNull, bad
	default:
		if c == '-' || (c >= '0' && c <= '9') {
			i, bad = scanNumber(b, i)
			return i, typeNumber, bad
		}
		return i, absent, unexpected(b, i, "a value")
	}
}

// scanContainer checks the object or array opening at b[i] (closed by
// closer) at nesting level depth and returns the index after it.
func scanContainer(b []byte, i, depth int, closer byte) (int, syntaxError) {
	if depth > maxDepth {
		return i, syntaxError{at: i, what: fmt.Sprintf("nesting deeper than %d levels", maxDepth)}
	}
	i = skipSpace(b, i+1)
	if peek(b, i) == closer {
		return i + 1, syntaxError{}
	}
	var bad syntaxError
	for {
		if closer == '}' {
			if peek(b, i) != '"' {
				return i, unexpected(b, i, "a string key")
			}
			if i, _, bad = scanString(b, i+1); bad.what != "" {
				return i, bad
			}
			i = skipSpace(b, i)
			if peek(b, i) != ':' {
				return i, unexpected(b, i, "':'")
			}
			i = skipSpace(b, i+1)
		}
		if i, _, bad = scanValue(b, i, depth); bad.what != "" {
			return i, bad
		}
		i = skipSpace(b, i)
		switch peek(b, i) {
		case ',':
			i = skipSpace(b, i+1)
		case closer:
			return i + 1, syntaxError{}
		default:
			return i, unexpected(b, i, fmt.Sprintf("',' or '%c'", closer))
		}
	}
}
