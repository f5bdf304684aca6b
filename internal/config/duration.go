package config

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	"gopkg.in/yaml.v3"
)

// day is 24 hours: touchledger's days are fixed-length (event time is UTC).
const day = 24 * time.Hour

// Duration is a time.Duration that reads and writes YAML as "30m", "1h30m"
// or with a day suffix "30d", "7d", "1d12h" (a day is 24 hours).
type Duration time.Duration

// D returns the value as a time.Duration.
func (d Duration) D() time.Duration { return time.Duration(d) }

// String writes whole days as "Nd" followed by the rest without zero units:
// 720h is "30d", 36h is "1d12h", 90m is "1h30m", 0 is "0s". ParseDuration
// reads every non-negative result back to the same value.
func (d Duration) String() string {
	v := time.Duration(d)
	switch {
	case v == 0:
		return "0s"
	case v < 0:
		if v == math.MinInt64 {
			return v.String()
		}
		return "-" + Duration(-v).String()
	}
	var s string
	if days := v / day; days > 0 {
		s = strconv.FormatInt(int64(days), 10) + "d"
	}
	if rest := v % day; rest > 0 {
		r := rest.String() // e.g. "1h0m0s", "30m0s", "1m0.5s", "10s", "500ms"
		if strings.HasSuffix(r, "m0s") {
			r = r[:len(r)-len("0s")]
		}
		if strings.HasSuffix(r, "h0m") {
			r = r[:len(r)-len("0m")]
		}
		s += r
	}
	return s
}

// ParseDuration reads a non-negative duration: an optional whole number of
// days with the suffix "d", then an optional time.ParseDuration text
// ("30m", "1h30m", "1.5s"). Examples: "30d" = 720h, "1d12h" = 36h, "90m",
// "0s". Signs are not accepted: no setting takes a negative duration.
func ParseDuration(s string) (time.Duration, error) {
	text := strings.TrimSpace(s)
	if text == "" {
		return 0, errors.New("empty duration, use forms like 30m, 12h, 7d or 1d12h")
	}
	if text[0] == '-' || text[0] == '+' {
		return 0, fmt.Errorf("duration %q has a sign; durations are never negative", s)
	}
	var total time.Duration
	digits := 0
	for digits < len(text) && text[digits] >= '0' && text[digits] <= '9' {
		digits++
	}
	if digits > 0 && digits < len(text) && text[digits] == 'd' {
		days, err := strconv.ParseInt(text[:digits], 10, 64)
		if err != nil || days > int64(math.MaxInt64/day) {
			return 0, fmt.Errorf("duration %q is too long", s)
		}
		total = time.Duration(days) * day
		text = text[digits+1:]
		if text == "" {
			return total, nil
		}
		if text[0] == '-' || text[0] == '+' {
			return 0, fmt.Errorf("duration %q has a sign after the days", s)
		}
	}
	rest, err := time.ParseDuration(text)
	if err != nil {
		return 0, fmt.Errorf("invalid duration %q, use forms like 30m, 12h, 7d or 1d12h", s)
	}
	if rest > math.MaxInt64-total {
		return 0, fmt.Errorf("duration %q is too long", s)
	}
	return total + rest, nil
}

// MarshalYAML writes the duration as its String.
func (d Duration) MarshalYAML() (any, error) { return d.String(), nil }

// UnmarshalYAML reads a duration written as text ("30m", "7d", "1d12h").
func (d *Duration) UnmarshalYAML(n *yaml.Node) error {
	if n.Kind != yaml.ScalarNode {
		return fmt.Errorf("line %d: a duration must be text like 30m or 7d", n.Line)
	}
	v, err := ParseDuration(n.Value)
	if err != nil {
		return fmt.Errorf("line %d: %w", n.Line, err)
	}
	*d = Duration(v)
	return nil
}
