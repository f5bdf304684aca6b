// Package config reads touchledger's YAML configuration file. Every key has a
// documented default (Default, docs/configuration.md); a file only needs the
// keys it changes. Unknown keys are errors, so a typo never silently keeps a
// default.
package config

import (
	"bytes"
	"errors"
	"fmt"
	"os"
	"strconv"
	"strings"
	"time"

	"gopkg.in/yaml.v3"
)

// Duration is a time.Duration written as "30m", "1h30m", or with a day
// suffix: "30d", "7d", "1d12h" (a day is 24 hours).
type Duration time.Duration

// D returns the value as a time.Duration.
func (d Duration) D() time.Duration { return time.Duration(d) }

// String formats d with whole days as "Nd".
func (d Duration) String() string {
	v := time.Duration(d)
	if v == 0 {
		return "0s"
	}
	const day = 24 * time.Hour
	if v%day == 0 {
		return strconv.FormatInt(int64(v/day), 10) + "d"
	}
	if v > day {
		rest := v % day
		return strconv.FormatInt(int64(v/day), 10) + "d" + strings.TrimSuffix(strings.TrimSuffix(rest.String(), "0s"), "0m")
	}
	return v.String()
}

// ParseDuration reads a duration with an optional leading day part ("7d",
// "1d12h", "90m").
func ParseDuration(s string) (time.Duration, error) {
	s = strings.TrimSpace(s)
	if s == "" {
		return 0, errors.New("empty duration")
	}
	var total time.Duration
	if i := strings.IndexByte(s, 'd'); i >= 0 {
		n, err := strconv.ParseInt(s[:i], 10, 64)
		if err != nil || n < 0 || n > 100*365 {
			return 0, fmt.Errorf("invalid duration %q: the day count must be a whole number up to 36500", s)
		}
		total = time.Duration(n) * 24 * time.Hour
		s = s[i+1:]
		if s == "" {
			return total, nil
		}
	}
	d, err := time.ParseDuration(s)
	if err != nil {
		return 0, fmt.Errorf("invalid duration %q: use forms like 30m, 12h, 7d or 1d12h", s)
	}
	if d < 0 {
		return 0, fmt.Errorf("invalid duration %q: negative", s)
	}
	return total + d, nil
}

// MarshalYAML writes the duration as text.
func (d Duration) MarshalYAML() (any, error) { return d.String(), nil }

// UnmarshalYAML reads the duration from text.
func (d *Duration) UnmarshalYAML(n *yaml.Node) error {
	var s string
	if err := n.Decode(&s); err != nil {
		return fmt.Errorf("line %d: duration must be text like 30m or 7d", n.Line)
	}
	v, err := ParseDuration(s)
	if err != nil {
		return fmt.Errorf("line %d: %w", n.Line, err)
	}
	*d = Duration(v)
	return nil
}

// Resolution is one bucket size of the store with its retention.
type Resolution struct {
	Name      string   `yaml:"name"`
	Step      Duration `yaml:"step"`
	Retention Duration `yaml:"retention"` // 0 = keep forever
}

// Weights are the position-based model's weights.
type Weights struct {
	First  float64 `yaml:"first"`  // default 0.4
	Middle float64 `yaml:"middle"` // default 0.2, split evenly over the middle touches
	Last   float64 `yaml:"last"`   // default 0.4
}

// Alert configures abandonment spike detection.
type Alert struct {
	Interval    Duration `yaml:"interval"`     // default 5m: abandonment rate per interval, by session end
	Lambda      float64  `yaml:"lambda"`       // default 0.2: EWMA weight of the newest interval
	Limit       float64  `yaml:"limit"`        // default 3: control limit in standard deviations (L)
	MinSessions int      `yaml:"min_sessions"` // default 30: intervals with fewer sessions at the cart step are not judged
	Baseline    Duration `yaml:"baseline"`     // default 7d: the baseline rate pools this much history
	CloseAfter  int      `yaml:"close_after"`  // default 3: quiet intervals before an alert closes
}

// Store configures the embedded store.
type Store struct {
	Resolutions    []Resolution `yaml:"resolutions"`     // default 5m kept 14d, hour kept 90d, day kept forever
	CacheUsers     int          `yaml:"cache_users"`     // default 100000 user states in memory
	MemtableMiB    int          `yaml:"memtable_mib"`    // default 64; one commit is at most 15 % of it
	BlockCacheMiB  int          `yaml:"block_cache_mib"` // default 32
	IndexCacheMiB  int          `yaml:"index_cache_mib"` // default 16
	CommitEvents   int          `yaml:"commit_events"`   // default 200000 inputs per commit at most
	CommitInterval Duration     `yaml:"commit_interval"` // default 1s wall time between commits at most
}

// Limits bound the size of input.
type Limits struct {
	MaxPayload int `yaml:"max_payload"` // default 65536 bytes per event
	MaxID      int `yaml:"max_id"`      // default 128 bytes
	MaxUser    int `yaml:"max_user"`    // default 256 bytes
	MaxName    int `yaml:"max_name"`    // default 128 bytes for channel, campaign and action
}

// Config is the whole configuration. See docs/configuration.md.
type Config struct {
	Currency          string   `yaml:"currency"`           // default "": accept any; else events with another currency are rejected
	SessionGap        Duration `yaml:"session_gap"`        // default 30m: a gap >= this starts a new session
	Lateness          Duration `yaml:"lateness"`           // default 5m: allowed event-time disorder
	ConversionActions []string `yaml:"conversion_actions"` // default [purchase]
	FunnelSteps       []string `yaml:"funnel_steps"`       // default [view_item, add_to_cart, checkout, purchase]
	CartStep          string   `yaml:"cart_step"`          // default add_to_cart: cart abandonment counts sessions reaching it
	ClickLookback     Duration `yaml:"click_lookback"`     // default 30d
	ViewLookback      Duration `yaml:"view_lookback"`      // default 1d
	JourneyTimeout    Duration `yaml:"journey_timeout"`    // default 30d
	DirectChannel     string   `yaml:"direct_channel"`     // default direct
	HalfLife          Duration `yaml:"half_life"`          // default 7d: time-decay half-life
	PositionWeights   Weights  `yaml:"position_weights"`   // default 0.4 / 0.2 / 0.4
	DedupHorizon      Duration `yaml:"dedup_horizon"`      // default 7d of event time
	MarkovMaxOrder    int      `yaml:"markov_max_order"`   // default 3 (1..4)
	CollapseRepeats   bool     `yaml:"collapse_repeats"`   // default true: A>A>B counts as A>B for the Markov model
	ShapleyCap        int      `yaml:"shapley_cap"`        // default 15 players (1..20); the rest pooled as "other"
	PathMaxLen        int      `yaml:"path_max_len"`       // default 8 steps shown per path
	TopPathsCapacity  int      `yaml:"top_paths_capacity"` // default 1000
	Alert             Alert    `yaml:"alert"`
	Store             Store    `yaml:"store"`
	Limits            Limits   `yaml:"limits"`
}

const day = Duration(24 * time.Hour)

// Default returns the documented defaults.
func Default() Config {
	return Config{
		SessionGap:        Duration(30 * time.Minute),
		Lateness:          Duration(5 * time.Minute),
		ConversionActions: []string{"purchase"},
		FunnelSteps:       []string{"view_item", "add_to_cart", "checkout", "purchase"},
		CartStep:          "add_to_cart",
		ClickLookback:     30 * day,
		ViewLookback:      day,
		JourneyTimeout:    30 * day,
		DirectChannel:     "direct",
		HalfLife:          7 * day,
		PositionWeights:   Weights{0.4, 0.2, 0.4},
		DedupHorizon:      7 * day,
		MarkovMaxOrder:    3,
		CollapseRepeats:   true,
		ShapleyCap:        15,
		PathMaxLen:        8,
		TopPathsCapacity:  1000,
		Alert: Alert{
			Interval: Duration(5 * time.Minute), Lambda: 0.2, Limit: 3,
			MinSessions: 30, Baseline: 7 * day, CloseAfter: 3,
		},
		Store: Store{
			Resolutions: []Resolution{
				{"5m", Duration(5 * time.Minute), 14 * day},
				{"hour", Duration(time.Hour), 90 * day},
				{"day", day, 0},
			},
			CacheUsers: 100000, MemtableMiB: 64, BlockCacheMiB: 32, IndexCacheMiB: 16,
			CommitEvents: 200000, CommitInterval: Duration(time.Second),
		},
		Limits: Limits{MaxPayload: 64 << 10, MaxID: 128, MaxUser: 256, MaxName: 128},
	}
}

// Load reads a configuration file over the defaults and validates it.
func Load(path string) (Config, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return Config{}, fmt.Errorf("config: %w", err)
	}
	c, err := Parse(b)
	if err != nil {
		return Config{}, fmt.Errorf("config %s: %w", path, err)
	}
	return c, nil
}

// Parse reads configuration text over the defaults and validates it.
func Parse(data []byte) (Config, error) {
	c := Default()
	if len(bytes.TrimSpace(data)) > 0 {
		dec := yaml.NewDecoder(bytes.NewReader(data))
		dec.KnownFields(true)
		if err := dec.Decode(&c); err != nil {
			return Config{}, err
		}
	}
	if err := c.Validate(); err != nil {
		return Config{}, err
	}
	return c, nil
}

// YAML returns the effective configuration as YAML.
func (c Config) YAML() ([]byte, error) {
	b, err := yaml.Marshal(c)
	if err != nil {
		return nil, err
	}
	return append([]byte("# touchledger effective configuration (see docs/configuration.md)\n"), b...), nil
}

// IsConversion reports whether action is a conversion.
func (c Config) IsConversion(action string) bool {
	for _, a := range c.ConversionActions {
		if a == action {
			return true
		}
	}
	return false
}

// Validate reports the first invalid setting, naming its key.
func (c Config) Validate() error {
	pos := func(name string, d Duration) error {
		if d <= 0 {
			return fmt.Errorf("%s must be positive, got %s", name, d)
		}
		return nil
	}
	for _, p := range []struct {
		n string
		d Duration
	}{{"session_gap", c.SessionGap}, {"click_lookback", c.ClickLookback}, {"view_lookback", c.ViewLookback},
		{"journey_timeout", c.JourneyTimeout}, {"half_life", c.HalfLife}, {"dedup_horizon", c.DedupHorizon},
		{"alert.interval", c.Alert.Interval}, {"alert.baseline", c.Alert.Baseline}, {"store.commit_interval", c.Store.CommitInterval}} {
		if err := pos(p.n, p.d); err != nil {
			return err
		}
	}
	if c.Lateness < 0 {
		return fmt.Errorf("lateness must not be negative, got %s", c.Lateness)
	}
	if c.ViewLookback > c.ClickLookback {
		return fmt.Errorf("view_lookback (%s) must not exceed click_lookback (%s)", c.ViewLookback, c.ClickLookback)
	}
	if err := names("conversion_actions", c.ConversionActions); err != nil {
		return err
	}
	if err := names("funnel_steps", c.FunnelSteps); err != nil {
		return err
	}
	if c.DirectChannel == "" {
		return errors.New("direct_channel must not be empty")
	}
	w := c.PositionWeights
	if w.First < 0 || w.Middle < 0 || w.Last < 0 {
		return errors.New("position_weights must not be negative")
	}
	if s := w.First + w.Middle + w.Last; s < 1-1e-9 || s > 1+1e-9 {
		return fmt.Errorf("position_weights must sum to 1, got %g", s)
	}
	if c.MarkovMaxOrder < 1 || c.MarkovMaxOrder > 4 {
		return fmt.Errorf("markov_max_order must be 1 to 4, got %d", c.MarkovMaxOrder)
	}
	if c.ShapleyCap < 1 || c.ShapleyCap > 20 {
		return fmt.Errorf("shapley_cap must be 1 to 20, got %d", c.ShapleyCap)
	}
	if c.PathMaxLen < 2 || c.TopPathsCapacity < 1 {
		return errors.New("path_max_len must be >= 2 and top_paths_capacity >= 1")
	}
	a := c.Alert
	if a.Lambda <= 0 || a.Lambda > 1 || a.Limit <= 0 || a.MinSessions < 1 || a.CloseAfter < 1 {
		return errors.New("alert: lambda must be in (0, 1], limit > 0, min_sessions >= 1, close_after >= 1")
	}
	s := c.Store
	if len(s.Resolutions) == 0 {
		return errors.New("store.resolutions must not be empty")
	}
	seen := map[string]bool{}
	for i, r := range s.Resolutions {
		if r.Name == "" || seen[r.Name] {
			return fmt.Errorf("store.resolutions[%d]: names must be present and unique", i)
		}
		seen[r.Name] = true
		if r.Step <= 0 || time.Duration(r.Step)%time.Second != 0 || r.Retention < 0 {
			return fmt.Errorf("store.resolutions[%d] %q: step must be whole seconds > 0 and retention >= 0", i, r.Name)
		}
		if i > 0 {
			p := s.Resolutions[i-1]
			if r.Step <= p.Step || r.Step%p.Step != 0 {
				return fmt.Errorf("store.resolutions[%d] %q: step %s must be a multiple of %q's %s", i, r.Name, r.Step, p.Name, p.Step)
			}
		}
	}
	if a.Interval%s.Resolutions[0].Step != 0 {
		return fmt.Errorf("alert.interval (%s) must be a multiple of the finest resolution step (%s)", a.Interval, s.Resolutions[0].Step)
	}
	if s.CacheUsers < 1 || s.CommitEvents < 1 || s.MemtableMiB < 8 || s.BlockCacheMiB < 1 || s.IndexCacheMiB < 1 {
		return errors.New("store: cache_users and commit_events must be >= 1, memtable_mib >= 8, caches >= 1")
	}
	l := c.Limits
	if l.MaxPayload < 256 || l.MaxID < 1 || l.MaxUser < 1 || l.MaxName < 1 {
		return errors.New("limits: max_payload must be >= 256 and the others >= 1")
	}
	return nil
}

func names(key string, xs []string) error {
	if len(xs) == 0 {
		return fmt.Errorf("%s must not be empty", key)
	}
	seen := map[string]bool{}
	for _, x := range xs {
		if x == "" || seen[x] {
			return fmt.Errorf("%s: names must be non-empty and unique, got %q", key, xs)
		}
		seen[x] = true
	}
	return nil
}
