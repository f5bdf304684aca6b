package config

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"os"
	"regexp"
	"slices"
	"strings"
	"time"

	"gopkg.in/yaml.v3"
)

// Resolution is one bucket size of the store, with how long its buckets are
// kept.
type Resolution struct {
	// Name labels the resolution in keys and answers, e.g. "minute".
	Name string `yaml:"name"`
	// Step is the bucket width; each step divides the next coarser one.
	Step Duration `yaml:"step"`
	// Retention is how long buckets are kept (by TTL); 0 keeps them forever.
	Retention Duration `yaml:"retention"`
}

// PositionWeights are the position-based model's weights for journeys of
// three or more touches; they sum to 1. One touch gets all the credit and
// two touches half each, whatever the weights.
type PositionWeights struct {
	// First is the first touch's share. Default 0.4.
	First float64 `yaml:"first"`
	// Middle is split evenly over the touches between first and last.
	// Default 0.2.
	Middle float64 `yaml:"middle"`
	// Last is the last touch's share. Default 0.4.
	Last float64 `yaml:"last"`
}

// Alert configures abandonment spike detection: an EWMA control chart
// (Roberts 1959; NIST/SEMATECH e-Handbook §6.3.2.4) over the abandonment rate
// per interval, with limits from the binomial variance p(1−p)/n (p-chart,
// §6.3.3.2).
type Alert struct {
	// Interval is the width of the intervals the rate is computed over, by
	// session end; a multiple of the finest store step. Default 5m.
	Interval Duration `yaml:"interval"`
	// Lambda is the EWMA weight of the newest interval, 0 < λ ≤ 1.
	// Default 0.2.
	Lambda float64 `yaml:"lambda"`
	// Limit is L, the width of the control limits in standard deviations of
	// the EWMA statistic. Default 3.
	Limit float64 `yaml:"limit"`
	// MinSessions is the fewest sessions an interval needs to be judged.
	// Default 30.
	MinSessions int `yaml:"min_sessions"`
	// Baseline is the history pooled for the in-control rate. Default 7d.
	Baseline Duration `yaml:"baseline"`
	// CloseAfter is how many consecutive intervals below the limit close an
	// open alert. Default 3.
	CloseAfter int `yaml:"close_after"`
	// Step is the funnel step whose abandonment is watched: sessions that
	// reached it (in order) and did not reach the last step. Default
	// checkout (a failing payment page shows here first).
	Step string `yaml:"step"`
	// Target, when above 0, is a fixed in-control abandonment rate used
	// instead of the rolling baseline (0 < target < 1). Default 0: rolling.
	Target float64 `yaml:"target"`
}

// Store configures the embedded Badger store and the commit cadence.
type Store struct {
	// Resolutions are the bucket sizes counters are kept at, finest first.
	// Default: 5m (kept 14d, long enough for the 7-day alert baseline), hour (1h, kept 90d), day (1d, kept
	// forever).
	Resolutions []Resolution `yaml:"resolutions"`
	// CacheUsers is how many users' session and journey state stay in
	// memory; the rest live in Badger. Default 100000.
	CacheUsers int `yaml:"cache_users"`
	// MemtableMiB is Badger's memtable size; one commit must fit in 15 % of
	// it, and below 8 MiB Badger refuses its default 1 MiB value threshold.
	// Default 64.
	MemtableMiB int `yaml:"memtable_mib"`
	// BlockCacheMiB is Badger's block cache. Default 32.
	BlockCacheMiB int `yaml:"block_cache_mib"`
	// IndexCacheMiB is Badger's index cache (Badger's 0 would mean
	// unbounded, so at least 1). Default 16.
	IndexCacheMiB int `yaml:"index_cache_mib"`
	// CommitEvents is the most input events one commit covers.
	// Default 200000.
	CommitEvents int `yaml:"commit_events"`
	// CommitInterval is the longest wall time between commits while input
	// flows. Default 1s.
	CommitInterval Duration `yaml:"commit_interval"`
	// MinFreeMiB and MinFreePercent make the free-space reserve of the
	// data directory's disk: the larger of MinFreeMiB and MinFreePercent %
	// of the disk. Below it a live worker stops fetching (and /readyz says
	// not ready) until space returns, and a replay stops after committing
	// what it read. Default 1024 MiB and 5 %.
	MinFreeMiB     int     `yaml:"min_free_mib"`
	MinFreePercent float64 `yaml:"min_free_percent"`
}

// Limits bound the size of an input event, in bytes; larger ones are
// rejected (too_large or bad_field).
type Limits struct {
	// MaxPayload is the largest payload. Default 65536 (64 KiB).
	MaxPayload int `yaml:"max_payload"`
	// MaxID is the longest event id. Default 128.
	MaxID int `yaml:"max_id"`
	// MaxUser is the longest user id. Default 256.
	MaxUser int `yaml:"max_user"`
	// MaxName is the longest channel, campaign, action or currency.
	// Default 128.
	MaxName int `yaml:"max_name"`
}

// Rejects configures rotation of the replay rejects file.
type Rejects struct {
	// MaxMiB: when a replay starts and the rejects file is larger, it is
	// renamed to FILE.1 (older ones shift up) and a new one begins. 0 never
	// rotates. Default 64.
	MaxMiB int `yaml:"max_mib"`
	// Keep is how many rotated files are kept. Default 3.
	Keep int `yaml:"keep"`
}

// Clock guards event time against events far ahead of the rest
// (internal/pipeline, clock.go).
type Clock struct {
	// MaxFuture: live input rejects an event more than this ahead of the
	// wall clock (reason future). 0 disables. Default 10m.
	MaxFuture Duration `yaml:"max_future"`
	// MaxJump: replay holds an event more than this ahead of the largest
	// event time seen aside until later events confirm the new time, else
	// rejects it as future. 0 disables. Default 1d.
	MaxJump Duration `yaml:"max_jump"`
}

// Privacy configures keyed pseudonyms for user ids (internal/privacy).
type Privacy struct {
	// KeyFile is a file holding the pseudonymisation key (at least 32 bytes,
	// or 64 hex digits), readable by its owner only. Empty: user ids are
	// stored as given, unless the environment variable TOUCHLEDGER_KEY_FILE
	// names a key file. Default empty.
	KeyFile string `yaml:"key_file"`
	// KeyVersion names the key in every pseudonym ("p<version>-…"); raise it
	// when rotating the key. Default 1.
	KeyVersion int `yaml:"key_version"`
}

// Config is touchledger's whole configuration. Default gives the documented
// defaults; a file only names the keys it changes. docs/configuration.md
// lists every key.
type Config struct {
	// Currency is the ISO 4217 code all values are in; events naming another
	// currency are rejected (reason currency). Default "": accept any
	// currency, with no conversion.
	Currency string `yaml:"currency"`
	// SessionGap ends a session: an action whose gap to the user's previous
	// action is ≥ this starts a new session. Default 30m.
	SessionGap Duration `yaml:"session_gap"`
	// Lateness is how far event time may trail the largest time seen; the
	// watermark is that time minus the lateness, and older events are
	// rejected as late. 0 means arrival order. Default 5m.
	Lateness Duration `yaml:"lateness"`
	// GoalActions are the actions that count as conversions; a
	// conversion credits the journey's touches and ends the journey.
	// Default [order].
	GoalActions []string `yaml:"goal_actions"`
	// FunnelSteps are the in-order funnel's steps, in order.
	// Default [product_view, basket_add, checkout, order].
	FunnelSteps []string `yaml:"funnel_steps"`
	// BasketStep is the action whose sessions count for basket abandonment
	// (reached it, did not convert). Default basket_add.
	BasketStep string `yaml:"basket_step"`
	// ClickLookback is the longest time from a click to the conversion it is
	// credited for. Default 30d.
	ClickLookback Duration `yaml:"click_lookback"`
	// ViewLookback is the same for views; at most ClickLookback. Default 1d.
	ViewLookback Duration `yaml:"view_lookback"`
	// JourneyTimeout ends a journey without conversion (a lost journey, @lost) when
	// its last touch is more than this before the next touch or conversion.
	// Default 30d.
	JourneyTimeout Duration `yaml:"journey_timeout"`
	// DirectChannel is the channel credited in full when a conversion has no
	// eligible touch, and the one last-marketing skips. Default direct.
	DirectChannel string `yaml:"direct_channel"`
	// HalfLife is the time-decay model's half-life: a touch Δt before the
	// conversion weighs 2^(−Δt/half_life). Default 7d.
	HalfLife Duration `yaml:"half_life"`
	// PositionWeights are the position-based model's weights.
	// Default 0.4 / 0.2 / 0.4.
	PositionWeights PositionWeights `yaml:"position_weights"`
	// DedupHorizon is how long (in event time) an accepted event id is
	// remembered; a repeat within it is a duplicate and changes nothing.
	// Default 7d.
	DedupHorizon Duration `yaml:"dedup_horizon"`
	// MarkovMaxOrder is the highest Markov-chain order kept (1 to 4);
	// transition counts are stored for every order up to it. Default 3.
	MarkovMaxOrder int `yaml:"markov_max_order"`
	// CollapseRepeats collapses consecutive repeats of a channel in Markov
	// paths (A → A → B counts as A → B). Default true.
	CollapseRepeats bool `yaml:"collapse_repeats"`
	// ShapleyCap is the most channels that are Shapley players (1 to 20; the
	// work grows as 2^players); the rest are pooled as "other". Default 15.
	ShapleyCap int `yaml:"shapley_cap"`
	// PathMaxLen is the most steps a top path shows; longer paths are cut
	// with an ellipsis. Default 8.
	PathMaxLen int `yaml:"path_max_len"`
	// Alert configures abandonment spike alerts.
	Alert Alert `yaml:"alert"`
	// Store configures the embedded store.
	Store Store `yaml:"store"`
	// Limits bound input events.
	Limits Limits `yaml:"limits"`
	// Privacy configures pseudonymous user ids.
	Privacy Privacy `yaml:"privacy"`
	// Rejects configures the replay rejects file.
	Rejects Rejects `yaml:"rejects"`
	// Clock guards event time.
	Clock Clock `yaml:"clock"`
}

// Default returns the documented defaults.
func Default() Config {
	return Config{
		Currency:        "",
		SessionGap:      Duration(30 * time.Minute),
		Lateness:        Duration(5 * time.Minute),
		GoalActions:     []string{"order"},
		FunnelSteps:     []string{"product_view", "basket_add", "checkout", "order"},
		BasketStep:      "basket_add",
		ClickLookback:   Duration(30 * day),
		ViewLookback:    Duration(day),
		JourneyTimeout:  Duration(30 * day),
		DirectChannel:   "direct",
		HalfLife:        Duration(7 * day),
		PositionWeights: PositionWeights{First: 0.4, Middle: 0.2, Last: 0.4},
		DedupHorizon:    Duration(7 * day),
		MarkovMaxOrder:  3,
		CollapseRepeats: true,
		ShapleyCap:      15,
		PathMaxLen:      8,
		Alert: Alert{
			Interval:    Duration(5 * time.Minute),
			Lambda:      0.2,
			Limit:       3,
			MinSessions: 30,
			Baseline:    Duration(7 * day),
			CloseAfter:  3,
			Step:        "checkout",
		},
		Store: Store{
			Resolutions: []Resolution{
				{Name: "5m", Step: Duration(5 * time.Minute), Retention: Duration(14 * day)},
				{Name: "hour", Step: Duration(time.Hour), Retention: Duration(90 * day)},
				{Name: "day", Step: Duration(day), Retention: 0},
			},
			CacheUsers:     100_000,
			MemtableMiB:    64,
			BlockCacheMiB:  32,
			IndexCacheMiB:  16,
			CommitEvents:   200_000,
			CommitInterval: Duration(time.Second),
			MinFreeMiB:     1024,
			MinFreePercent: 5,
		},
		Privacy: Privacy{KeyVersion: 1},
		Rejects: Rejects{MaxMiB: 64, Keep: 3},
		Clock:   Clock{MaxFuture: Duration(10 * time.Minute), MaxJump: Duration(day)},
		Limits:  Limits{MaxPayload: 64 << 10, MaxID: 128, MaxUser: 256, MaxName: 128},
	}
}

// Load reads the configuration file at path over Default and validates it.
func Load(path string) (Config, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return Config{}, fmt.Errorf("read configuration: %w", err)
	}
	c, err := Parse(data)
	if err != nil {
		return Config{}, fmt.Errorf("configuration %s: %w", path, err)
	}
	return c, nil
}

// Parse reads configuration text over Default and validates it. Keys it
// does not know are errors, so a misspelt key never silently keeps its
// default. Empty text gives the defaults. Lists replace the default list.
func Parse(data []byte) (Config, error) {
	c := Default()
	dec := yaml.NewDecoder(bytes.NewReader(data))
	dec.KnownFields(true)
	switch err := dec.Decode(&c); {
	case errors.Is(err, io.EOF): // no document: the defaults
	case err != nil:
		return Config{}, fmt.Errorf("parse yaml: %w", unknownKeys(err))
	default:
		var next yaml.Node
		if err := dec.Decode(&next); !errors.Is(err, io.EOF) {
			return Config{}, errors.New("parse yaml: more than one document; a configuration is one yaml document")
		}
	}
	if err := c.Validate(); err != nil {
		return Config{}, err
	}
	return c, nil
}

// sections names the YAML section of each configuration struct, for
// unknownKeys.
var sections = map[string]string{
	"Config": "", "Alert": "alert.", "Store": "store.", "Limits": "limits.", "Privacy": "privacy.",
	"Rejects": "rejects.", "Clock": "clock.", "PositionWeights": "position_weights.", "Resolution": "store.resolutions[].",
}

var notFound = regexp.MustCompile(`^line (\d+): field (\S+) not found in type config\.(\w+)$`)

// unknownKeys rewrites yaml's "field x not found in type config.Store"
// into the key's name ("unknown key store.x").
func unknownKeys(err error) error {
	var te *yaml.TypeError
	if !errors.As(err, &te) {
		return err
	}
	msgs := make([]string, 0, len(te.Errors))
	for _, m := range te.Errors {
		if g := notFound.FindStringSubmatch(m); g != nil {
			m = fmt.Sprintf("line %s: unknown key %s%s (docs/configuration.md lists the keys)", g[1], sections[g[3]], g[2])
		}
		msgs = append(msgs, m)
	}
	return errors.New(strings.Join(msgs, "; "))
}

// header opens the YAML written by Config.YAML.
const header = "# touchledger configuration: the effective values. Every key is explained in docs/configuration.md.\n"

// YAML returns the effective configuration as YAML, each key with a comment
// saying what it means. Parse reads it back to the same Config.
func (c Config) YAML() ([]byte, error) {
	var doc yaml.Node
	if err := doc.Encode(c); err != nil {
		return nil, fmt.Errorf("encode configuration: %w", err)
	}
	commentKeys(&doc, "")
	var buf bytes.Buffer
	buf.WriteString(header)
	enc := yaml.NewEncoder(&buf)
	enc.SetIndent(2)
	if err := enc.Encode(&doc); err != nil {
		return nil, fmt.Errorf("encode configuration: %w", err)
	}
	if err := enc.Close(); err != nil {
		return nil, fmt.Errorf("encode configuration: %w", err)
	}
	return buf.Bytes(), nil
}

// commentKeys sets each mapping key's head comment from keyDocs; prefix is
// the dotted path of the mapping.
func commentKeys(n *yaml.Node, prefix string) {
	if n.Kind != yaml.MappingNode {
		return
	}
	for i := 0; i+1 < len(n.Content); i += 2 {
		key, value := n.Content[i], n.Content[i+1]
		path := prefix + key.Value
		if doc, ok := keyDoc(path); ok {
			key.HeadComment = wrap(doc, 100-2*strings.Count(path, "."))
		}
		commentKeys(value, path+".")
	}
}

// wrap breaks text into lines of at most width bytes at spaces (a longer
// word keeps its own line).
func wrap(text string, width int) string {
	var b strings.Builder
	line := 0
	for i, word := range strings.Fields(text) {
		if i > 0 {
			if line+1+len(word) > width {
				b.WriteByte('\n')
				line = 0
			} else {
				b.WriteByte(' ')
				line++
			}
		}
		b.WriteString(word)
		line += len(word)
	}
	return b.String()
}

// IsConversion reports whether action is one of the goal actions.
func (c Config) IsConversion(action string) bool {
	return slices.Contains(c.GoalActions, action)
}
