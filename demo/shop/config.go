package shop

import (
	"errors"
	"fmt"
	"time"
)

// Config describes one simulated world. The same Config always produces the
// same bytes.
type Config struct {
	Seed     int64
	Start    time.Time // first instant of day 0; the shop's clock is UTC, so use a UTC midnight
	Days     int       // length of the period; events outside [Start, Start+Days·24h) are not written
	Visitors int       // people who first visit during the period (about 5 events each)
	// ShiftDay is the first day (0-based) of the new budget: search_ads
	// spends 40 % of before, social_ads twice as much. ShiftDay >= Days: no shift.
	ShiftDay int
	// IncidentDay, IncidentStart (offset in that day) and IncidentLength place
	// the checkout outage; IncidentLength 0 means no outage.
	IncidentDay    int
	IncidentStart  time.Duration
	IncidentLength time.Duration
	// Off lists channels switched off: they emit no touches and lift nothing.
	Off map[string]bool
}

// DefaultConfig is the demo's world: four weeks from 2026-10-01, the budget
// shift on day 14 and a 40-minute checkout outage on day 20 at 15:00 UTC.
func DefaultConfig() Config {
	return Config{
		Seed:           1,
		Start:          time.Date(2026, 10, 1, 0, 0, 0, 0, time.UTC),
		Days:           28,
		Visitors:       100000,
		ShiftDay:       14,
		IncidentDay:    20,
		IncidentStart:  15 * time.Hour,
		IncidentLength: 40 * time.Minute,
	}
}

// ErrConfig marks an invalid Config; Validate wraps it with the reason.
var ErrConfig = errors.New("invalid demo config")

// maxDays keeps every time offset and the week counter well inside their types.
const maxDays = 3650

// maxVisitors keeps visitor numbers inside an int32 and ids at 9 characters.
const maxVisitors = 100_000_000

// Validate reports the first problem with c, wrapping ErrConfig.
func (c Config) Validate() error {
	switch {
	case c.Start.IsZero():
		return fmt.Errorf("start is not set: %w", ErrConfig)
	case c.Days < 1 || c.Days > maxDays:
		return fmt.Errorf("days %d not in [1, %d]: %w", c.Days, maxDays, ErrConfig)
	case c.Visitors < 0 || c.Visitors > maxVisitors:
		return fmt.Errorf("visitors %d not in [0, %d]: %w", c.Visitors, maxVisitors, ErrConfig)
	case c.ShiftDay < 0:
		return fmt.Errorf("shift day %d is negative: %w", c.ShiftDay, ErrConfig)
	case c.IncidentLength < 0:
		return fmt.Errorf("incident length %v is negative: %w", c.IncidentLength, ErrConfig)
	case c.IncidentLength > 0 && (c.IncidentDay < 0 || c.IncidentDay >= c.Days):
		return fmt.Errorf("incident day %d not in [0, %d): %w", c.IncidentDay, c.Days, ErrConfig)
	case c.IncidentLength > 0 && (c.IncidentStart < 0 || c.IncidentStart >= 24*time.Hour):
		return fmt.Errorf("incident start %v not within a day: %w", c.IncidentStart, ErrConfig)
	}
	for name := range c.Off {
		if channelIndex(name) < 0 {
			return fmt.Errorf("off: unknown channel %q: %w", name, ErrConfig)
		}
	}
	return nil
}

// Channels lists the touch channels in a fixed order. Visits that no touch
// precedes count as direct; direct emits no touch and is not listed.
func Channels() []string {
	out := make([]string, numChannels)
	for i := range channelSpecs {
		out[i] = channelSpecs[i].name
	}
	return out
}

func channelIndex(name string) int {
	for i := range channelSpecs {
		if channelSpecs[i].name == name {
			return i
		}
	}
	return -1
}
