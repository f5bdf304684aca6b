package event

import (
	"math/rand/v2"
	"regexp"
	"testing"
	"time"
)

// rfc3339Grammar is RFC 3339 section 5.6 date-time with upper-case T and Z,
// as time.Parse reads it; hour and minute ranges of the offset are checked
// separately.
var rfc3339Grammar = regexp.MustCompile(`^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(\.\d+)?(Z|[+-]([01]\d|2[0-3]):[0-5]\d)$`)

// referenceTime is the reference reading of s: the RFC 3339 grammar above,
// then the standard library for the calendar and the instant.
func referenceTime(s string) (time.Time, bool) {
	if !rfc3339Grammar.MatchString(s) {
		return time.Time{}, false
	}
	t, err := time.ParseInLocation(time.RFC3339Nano, s, time.UTC)
	if err != nil {
		return time.Time{}, false
	}
	return t.UTC(), true
}

func TestParseRFC3339(t *testing.T) {
	tests := []string{
		"2026-03-10T23:40:00Z",
		"2026-03-10T23:40:00.5Z",
		"2026-03-10T23:40:00.123456789Z",
		"2026-03-10T23:40:00.1234567891234Z", // digits after the ninth are dropped
		"2026-03-11T01:40:00+02:00",
		"2026-03-10T20:10:00-03:30",
		"2026-03-10T23:40:00-00:00",
		"2024-02-29T12:00:00Z", // leap day
		"2000-02-29T12:00:00Z", // leap day, divisible by 400
		"1900-02-29T12:00:00Z", // not a leap day, divisible by 100
		"2023-02-29T12:00:00Z",
		"2026-04-31T00:00:00Z",
		"2026-12-31T23:59:59.999999999+23:59",
		"0000-01-01T00:00:00Z",
		"0000-01-01T00:00:00+01:00",
		"9999-12-31T23:59:59-23:59",
		"1969-12-31T23:59:59.999999999Z",
		"1970-01-01T00:00:00Z",
		"2026-00-10T23:40:00Z",
		"2026-03-00T23:40:00Z",
		"2026-03-10T23:60:00Z",
		"2026-03-10T23:40:60Z",
		"2026-03-10T23:40:00+24:00",
		"2026-03-10T23:40:00,5Z",
		"2026-03-10T23:40:00.Z",
		"2026-03-10T23:40:00z",
		"2026-03-10t23:40:00Z",
		"2026-03-10T23:40:00+02",
		"2026-03-10T23:40:00",
		"2026-3-10T23:40:00Z",
		"+026-03-10T23:40:00Z",
		"2026-03-10T23:40:00Z0",
		"2026/03/10T23:40:00Z",
	}
	for _, s := range tests {
		got, gotOK := parseRFC3339([]byte(s))
		want, wantOK := referenceTime(s)
		if gotOK != wantOK || got != want {
			t.Errorf("parseRFC3339(%q) = %v, %v; reference %v, %v", s, got, gotOK, want, wantOK)
		}
	}
}

// TestParseRFC3339Random compares with the reference on random instants over
// years 0000-9999, written in random offsets with 0-12 fraction digits.
func TestParseRFC3339Random(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 11))
	lo := time.Date(0, 1, 2, 0, 0, 0, 0, time.UTC).Unix()
	hi := time.Date(9999, 12, 30, 0, 0, 0, 0, time.UTC).Unix()
	n := 20000
	if testing.Short() {
		n = 2000
	}
	for range n {
		at := time.Unix(lo+rng.Int64N(hi-lo), rng.Int64N(1e9))
		offset := (rng.IntN(47) - 23) * 3600
		if rng.IntN(2) == 0 {
			offset += rng.IntN(60) * 60 * sign(offset)
		}
		layout := "2006-01-02T15:04:05" + []string{"", ".0", ".000", ".000000", ".000000000", ".999999999"}[rng.IntN(6)] + "Z07:00"
		s := at.In(time.FixedZone("", offset)).Format(layout)
		if rng.IntN(10) == 0 { // more than nine fraction digits
			zone := "Z"
			if offset != 0 {
				zone = s[len(s)-len("-07:00"):]
			}
			s = s[:19] + ".123456789012" + zone
		}
		got, gotOK := parseRFC3339([]byte(s))
		want, wantOK := referenceTime(s)
		if gotOK != wantOK || got != want {
			t.Fatalf("parseRFC3339(%q) = %v, %v; reference %v, %v", s, got, gotOK, want, wantOK)
		}
	}
}

// FuzzParseRFC3339 compares parseRFC3339 with the reference on any string.
func FuzzParseRFC3339(f *testing.F) {
	for _, s := range []string{"2026-03-10T23:40:00Z", "2026-03-10T23:40:00.123456789+05:45", "2024-02-29T00:00:00-23:59", "0000-01-01T00:00:00Z"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		got, gotOK := parseRFC3339([]byte(s))
		want, wantOK := referenceTime(s)
		if gotOK != wantOK || got != want {
			t.Fatalf("parseRFC3339(%q) = %v, %v; reference %v, %v", s, got, gotOK, want, wantOK)
		}
	})
}

func TestDaysSinceEpoch(t *testing.T) {
	for year := 0; year <= 9999; year += 7 {
		for month := 1; month <= 12; month++ {
			day := 1 + (year+month)%daysIn(year, month)
			got := daysSinceEpoch(year, month, day)
			want := time.Date(year, time.Month(month), day, 0, 0, 0, 0, time.UTC).Unix() / 86400 // midnight: exact
			if got != want {
				t.Fatalf("daysSinceEpoch(%d, %d, %d) = %d, want %d (time package)", year, month, day, got, want)
			}
		}
	}
}

func sign(x int) int {
	if x < 0 {
		return -1
	}
	return 1
}
