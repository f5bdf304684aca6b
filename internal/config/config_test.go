package config

import (
	"errors"
	"os"
	"path/filepath"
	"reflect"
	"slices"
	"strings"
	"testing"
	"time"
	"unicode"
	"unicode/utf8"

	"gopkg.in/yaml.v3"
)

// TestDefault checks the defaults against their sources: issue 2 ("Defaults:
// session gap 30 min; allowed lateness 5 min; goal action order;
// funnel steps product_view, basket_add, checkout, order; click look-back 30
// days; view look-back 1 day; journey timeout 30 days; direct channel name
// direct; time-decay half-life 7 days; position-based weights 0.4 / 0.2 /
// 0.4"; limits 64 KiB / 128 / 256 / 128), issue 3 (Markov order 3, Shapley
// cap 15, alert interval 5 min) and issue 11 (the names). The 30-minute session gap is
// common practice (docs/references.md §1, Catledge & Pitkow 1995 used 25.5
// min); 40/20/40 is common practice (docs/references.md §2). Store sizes and
// alert λ, L, minimum sessions are the project's own choices.
func TestDefault(t *testing.T) {
	got := Default()
	want := Config{
		SessionGap:      Duration(30 * time.Minute),
		Lateness:        Duration(5 * time.Minute),
		GoalActions:     []string{"order"},
		FunnelSteps:     []string{"product_view", "basket_add", "checkout", "order"},
		BasketStep:      "basket_add",
		ClickLookback:   Duration(720 * time.Hour),
		ViewLookback:    Duration(24 * time.Hour),
		JourneyTimeout:  Duration(720 * time.Hour),
		DirectChannel:   "direct",
		HalfLife:        Duration(168 * time.Hour),
		PositionWeights: PositionWeights{First: 0.4, Middle: 0.2, Last: 0.4},
		DedupHorizon:    Duration(168 * time.Hour),
		MarkovMaxOrder:  3,
		CollapseRepeats: true,
		ShapleyCap:      15,
		PathMaxLen:      8,
		Alert: Alert{Interval: Duration(5 * time.Minute), Lambda: 0.2, Limit: 3, MinSessions: 30,
			Baseline: Duration(168 * time.Hour), CloseAfter: 3, Step: "checkout"},
		Store: Store{
			Resolutions: []Resolution{
				{"5m", Duration(5 * time.Minute), Duration(14 * 24 * time.Hour)},
				{"hour", Duration(time.Hour), Duration(2160 * time.Hour)},
				{"day", Duration(24 * time.Hour), 0},
			},
			CacheUsers: 100000, MemtableMiB: 64, BlockCacheMiB: 32, IndexCacheMiB: 16,
			CommitEvents: 200000, CommitInterval: Duration(time.Second), MinFreeMiB: 1024, MinFreePercent: 5,
		},
		Limits:  Limits{MaxPayload: 65536, MaxID: 128, MaxUser: 256, MaxName: 128},
		Privacy: Privacy{KeyVersion: 1},
		Rejects: Rejects{MaxMiB: 64, Keep: 3},
		Clock:   Clock{MaxFuture: Duration(10 * time.Minute), MaxJump: Duration(day)},
	}
	if !reflect.DeepEqual(got, want) {
		t.Errorf("Default() =\n%+v\nwant\n%+v", got, want)
	}
	if err := got.Validate(); err != nil {
		t.Errorf("Default().Validate() = %v", err)
	}
}

func TestDefaultsRoundTrip(t *testing.T) {
	text, err := Default().YAML()
	if err != nil {
		t.Fatal(err)
	}
	got, err := Parse(text)
	if err != nil {
		t.Fatalf("Parse(YAML()) error: %v\n%s", err, text)
	}
	if want := Default(); !reflect.DeepEqual(got, want) {
		t.Errorf("Parse(YAML()) =\n%+v\nwant\n%+v", got, want)
	}
	if !strings.HasPrefix(string(text), "# ") {
		t.Errorf("YAML() does not start with a comment line: %.80q", text)
	}
}

// TestYAMLRoundTripChanged round-trips a configuration that differs from the
// defaults everywhere it can.
func TestYAMLRoundTripChanged(t *testing.T) {
	c := Default()
	c.Currency = "EUR"
	c.SessionGap = Duration(90 * time.Minute)
	c.Lateness = 0
	c.GoalActions = []string{"order", "signup"}
	c.ViewLookback = Duration(36 * time.Hour)
	c.PositionWeights = PositionWeights{First: 0.3, Middle: 0.3, Last: 0.4}
	c.CollapseRepeats = false
	c.Alert.Lambda = 0.05
	c.Alert.Interval = Duration(90 * time.Second)
	c.Store.Resolutions = []Resolution{{"tiny", Duration(30 * time.Second), Duration(12*time.Hour + 30*time.Second)}, {"week", Duration(7 * 24 * time.Hour), 0}}
	c.Store.CommitInterval = Duration(1500 * time.Millisecond)
	text, err := c.YAML()
	if err != nil {
		t.Fatal(err)
	}
	got, err := Parse(text)
	if err != nil {
		t.Fatalf("Parse(YAML()) error: %v\n%s", err, text)
	}
	if !reflect.DeepEqual(got, c) {
		t.Errorf("Parse(YAML()) =\n%+v\nwant\n%+v\n%s", got, c, text)
	}
}

func TestParseOverrides(t *testing.T) {
	text := `
# A shop that counts sign-ups too and sessions with a longer gap.
currency: EUR
session_gap: 45m
goal_actions: [order, signup]
position_weights:
  first: 0.5
  middle: 0
  last: 0.5
alert:
  lambda: 0.3
store:
  resolutions:
    - {name: five_minutes, step: 5m, retention: 14d}
    - {name: day, step: 1d, retention: 0s}
`
	got, err := Parse([]byte(text))
	if err != nil {
		t.Fatal(err)
	}
	want := Default()
	want.Currency = "EUR"
	want.SessionGap = Duration(45 * time.Minute)
	want.GoalActions = []string{"order", "signup"}
	want.PositionWeights = PositionWeights{First: 0.5, Middle: 0, Last: 0.5}
	want.Alert.Lambda = 0.3
	want.Store.Resolutions = []Resolution{{"five_minutes", Duration(5 * time.Minute), Duration(14 * 24 * time.Hour)}, {"day", Duration(24 * time.Hour), 0}}
	want.Alert.Interval = Duration(5 * time.Minute) // unchanged: other keys of a named section keep their defaults
	if !reflect.DeepEqual(got, want) {
		t.Errorf("Parse =\n%+v\nwant\n%+v", got, want)
	}
}

func TestParseEmpty(t *testing.T) {
	for _, text := range []string{"", "\n\n", "# only a comment\n", "---\n"} {
		got, err := Parse([]byte(text))
		if err != nil {
			t.Errorf("Parse(%q) error: %v", text, err)
			continue
		}
		if !reflect.DeepEqual(got, Default()) {
			t.Errorf("Parse(%q) = %+v, want the defaults", text, got)
		}
	}
}

func TestParseErrors(t *testing.T) {
	tests := []struct {
		name string
		text string
		want string // a part of the error text
	}{
		{"unknown top-level key", "sesion_gap: 45m\n", "unknown key sesion_gap"},
		{"unknown nested key", "alert:\n  lamda: 0.3\n", "unknown key alert.lamda"},
		{"unknown key in a resolution", "store:\n  resolutions:\n    - {name: m, step: 1m, keep: 1d}\n", "unknown key store.resolutions[].keep"},
		{"duration without unit", "session_gap: 30\n", `line 1: invalid duration "30"`},
		{"duration as a list", "session_gap: [30m]\n", "line 1: a duration must be text"},
		{"negative duration", "lateness: -5m\n", "has a sign"},
		{"number as text", "markov_max_order: three\n", "cannot unmarshal"},
		{"list where a name is wanted", "basket_step: [a, b]\n", "cannot unmarshal"},
		{"not a mapping", "- session_gap\n", "cannot unmarshal"},
		{"bad yaml", "session_gap: [30m\n", "parse yaml"},
		{"two documents", "session_gap: 30m\n---\nlateness: 1m\n", "more than one document"},
		{"valid yaml, invalid value", "markov_max_order: 5\n", "markov_max_order: must be 1 to 4, got 5"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			_, err := Parse([]byte(tt.text))
			if err == nil || !strings.Contains(err.Error(), tt.want) {
				t.Errorf("Parse(%q) error = %v, want one containing %q", tt.text, err, tt.want)
			}
		})
	}
}

func TestLoad(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "touchledger.yaml")
	if err := os.WriteFile(path, []byte("lateness: 0s\nhalf_life: 3d12h\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	got, err := Load(path)
	if err != nil {
		t.Fatal(err)
	}
	want := Default()
	want.Lateness = 0
	want.HalfLife = Duration(84 * time.Hour)
	if !reflect.DeepEqual(got, want) {
		t.Errorf("Load = %+v, want %+v", got, want)
	}

	if _, err := Load(filepath.Join(dir, "missing.yaml")); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("Load(missing) error = %v, want os.ErrNotExist", err)
	}
	bad := filepath.Join(dir, "bad.yaml")
	if err := os.WriteFile(bad, []byte("shapley_cap: 0\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := Load(bad); err == nil || !strings.Contains(err.Error(), bad) || !strings.Contains(err.Error(), "shapley_cap") {
		t.Errorf("Load(bad) error = %v, want one naming the file and shapley_cap", err)
	}
}

func TestValidate(t *testing.T) {
	tests := []struct {
		name string
		edit func(*Config)
		want []string // keys of the expected problems, in order
	}{
		{"defaults", func(*Config) {}, nil},
		{"currency lower case", func(c *Config) { c.Currency = "eur" }, []string{"currency"}},
		{"currency too long", func(c *Config) { c.Currency = "EURO" }, []string{"currency"}},
		{"session gap zero", func(c *Config) { c.SessionGap = 0 }, []string{"session_gap"}},
		{"lateness negative", func(c *Config) { c.Lateness = Duration(-time.Second) }, []string{"lateness"}},
		{"lateness zero is arrival order", func(c *Config) { c.Lateness = 0 }, nil},
		{"no goal actions", func(c *Config) { c.GoalActions = nil }, []string{"goal_actions"}},
		{"empty goal action", func(c *Config) { c.GoalActions = []string{"order", ""} }, []string{"goal_actions[1]"}},
		{"repeated goal action", func(c *Config) { c.GoalActions = []string{"order", "signup", "order"} }, []string{"goal_actions[2]"}},
		{"goal action longer than max_name", func(c *Config) { c.GoalActions = []string{strings.Repeat("x", 129)} }, []string{"goal_actions[0]"}},
		{"goal action with a control character", func(c *Config) { c.GoalActions = []string{"buy\x1f"} }, []string{"goal_actions[0]"}},
		{"no funnel steps", func(c *Config) { c.FunnelSteps = []string{} }, []string{"funnel_steps", "alert.step"}},
		{"repeated funnel step", func(c *Config) { c.FunnelSteps = []string{"product_view", "checkout", "product_view"} }, []string{"funnel_steps[2]"}},
		{"empty basket step", func(c *Config) { c.BasketStep = "" }, []string{"basket_step"}},
		{"reserved goal action", func(c *Config) { c.GoalActions = []string{"@converted"} }, []string{"goal_actions[0]"}},
		{"reserved funnel step", func(c *Config) { c.FunnelSteps = []string{"@entry", "checkout", "order"} }, []string{"funnel_steps[0]"}},
		{"reserved basket step", func(c *Config) { c.BasketStep = "@basket" }, []string{"basket_step"}},
		{"reserved direct channel", func(c *Config) { c.DirectChannel = "@direct" }, []string{"direct_channel"}},
		{"click lookback zero", func(c *Config) { c.ClickLookback = 0 }, []string{"click_lookback", "view_lookback"}},
		{"view lookback zero", func(c *Config) { c.ViewLookback = 0 }, []string{"view_lookback"}},
		{"view lookback above click lookback", func(c *Config) { c.ViewLookback = Duration(31 * 24 * time.Hour) }, []string{"view_lookback"}},
		{"view lookback equal to click lookback", func(c *Config) { c.ViewLookback = c.ClickLookback }, nil},
		{"journey timeout zero", func(c *Config) { c.JourneyTimeout = 0 }, []string{"journey_timeout"}},
		{"empty direct channel", func(c *Config) { c.DirectChannel = "" }, []string{"direct_channel"}},
		{"half life zero", func(c *Config) { c.HalfLife = 0 }, []string{"half_life"}},
		{"weights sum below 1", func(c *Config) { c.PositionWeights.Middle = 0.1 }, []string{"position_weights"}},
		{"weight negative", func(c *Config) { c.PositionWeights = PositionWeights{First: 0.6, Middle: -0.2, Last: 0.6} }, []string{"position_weights.middle"}},
		{"weight not a number", func(c *Config) { c.PositionWeights.First = nan() }, []string{"position_weights.first", "position_weights"}},
		{"weights sum to 1 within 1e-9", func(c *Config) { c.PositionWeights = PositionWeights{First: 0.1, Middle: 0.2, Last: 0.7} }, nil},
		{"weights off by 1e-8", func(c *Config) { c.PositionWeights = PositionWeights{First: 0.4, Middle: 0.2, Last: 0.40000001} }, []string{"position_weights"}},
		{"all credit to the last touch", func(c *Config) { c.PositionWeights = PositionWeights{Last: 1} }, nil},
		{"dedup horizon zero", func(c *Config) { c.DedupHorizon = 0 }, []string{"dedup_horizon"}},
		{"markov order 0", func(c *Config) { c.MarkovMaxOrder = 0 }, []string{"markov_max_order"}},
		{"markov order 5", func(c *Config) { c.MarkovMaxOrder = 5 }, []string{"markov_max_order"}},
		{"markov order 4", func(c *Config) { c.MarkovMaxOrder = 4 }, nil},
		{"shapley cap 0", func(c *Config) { c.ShapleyCap = 0 }, []string{"shapley_cap"}},
		{"shapley cap 21", func(c *Config) { c.ShapleyCap = 21 }, []string{"shapley_cap"}},
		{"shapley cap 20", func(c *Config) { c.ShapleyCap = 20 }, nil},
		{"path max len 1", func(c *Config) { c.PathMaxLen = 1 }, []string{"path_max_len"}},
		{"alert interval zero", func(c *Config) { c.Alert.Interval = 0 }, []string{"alert.interval"}},
		{"alert interval off the finest step", func(c *Config) { c.Alert.Interval = Duration(90 * time.Second) }, []string{"alert.interval"}},
		{"alert lambda 0", func(c *Config) { c.Alert.Lambda = 0 }, []string{"alert.lambda"}},
		{"alert lambda above 1", func(c *Config) { c.Alert.Lambda = 1.5 }, []string{"alert.lambda"}},
		{"alert lambda 1 (a Shewhart chart)", func(c *Config) { c.Alert.Lambda = 1 }, nil},
		{"alert limit 0", func(c *Config) { c.Alert.Limit = 0 }, []string{"alert.limit"}},
		{"alert min sessions 0", func(c *Config) { c.Alert.MinSessions = 0 }, []string{"alert.min_sessions"}},
		{"alert baseline zero", func(c *Config) { c.Alert.Baseline = 0 }, []string{"alert.baseline"}},
		{"alert baseline shorter than the interval", func(c *Config) { c.Alert.Baseline = Duration(time.Minute) }, []string{"alert.baseline"}},
		{"alert close after 0", func(c *Config) { c.Alert.CloseAfter = 0 }, []string{"alert.close_after"}},
		{"no resolutions", func(c *Config) { c.Store.Resolutions = nil }, []string{"store.resolutions"}},
		{"resolution without a name", func(c *Config) { c.Store.Resolutions[1].Name = "" }, []string{"store.resolutions[1].name"}},
		{"resolution names repeat", func(c *Config) { c.Store.Resolutions[2].Name = "5m" }, []string{"store.resolutions[2].name"}},
		{"resolution step zero", func(c *Config) { c.Store.Resolutions[0].Step = 0 }, []string{"store.resolutions[0].step"}},
		{"resolution step not whole seconds", func(c *Config) { c.Store.Resolutions[0].Step = Duration(1500 * time.Millisecond) }, []string{"store.resolutions[0].step"}},
		{"resolutions out of order", func(c *Config) {
			c.Store.Resolutions[0], c.Store.Resolutions[1] = c.Store.Resolutions[1], c.Store.Resolutions[0]
		}, []string{"store.resolutions[1].step", "alert.interval"}},
		{"resolution step does not divide the next", func(c *Config) { c.Store.Resolutions[1].Step = Duration(7 * time.Hour) }, []string{"store.resolutions[2].step"}},
		{"resolution retention negative", func(c *Config) { c.Store.Resolutions[0].Retention = Duration(-time.Hour) }, []string{"store.resolutions[0].retention"}},
		{"resolution retention below the step", func(c *Config) { c.Store.Resolutions[1].Retention = Duration(time.Minute) }, []string{"store.resolutions[1].retention"}},
		{"cache users 0", func(c *Config) { c.Store.CacheUsers = 0 }, []string{"store.cache_users"}},
		{"memtable 7 MiB", func(c *Config) { c.Store.MemtableMiB = 7 }, []string{"store.memtable_mib"}},
		{"block cache 0", func(c *Config) { c.Store.BlockCacheMiB = 0 }, []string{"store.block_cache_mib"}},
		{"index cache 0", func(c *Config) { c.Store.IndexCacheMiB = 0 }, []string{"store.index_cache_mib"}},
		{"commit events 0", func(c *Config) { c.Store.CommitEvents = 0 }, []string{"store.commit_events"}},
		{"commit interval zero", func(c *Config) { c.Store.CommitInterval = 0 }, []string{"store.commit_interval"}},
		{"max payload 255", func(c *Config) { c.Limits.MaxPayload = 255 }, []string{"limits.max_payload"}},
		{"max id 0", func(c *Config) { c.Limits.MaxID = 0 }, []string{"limits.max_id"}},
		{"max user 0", func(c *Config) { c.Limits.MaxUser = 0 }, []string{"limits.max_user"}},
		{"max name shorter than the names", func(c *Config) { c.Limits.MaxName = 8 }, []string{
			"funnel_steps[0]", "funnel_steps[1]", "basket_step"}},
		{"several problems at once", func(c *Config) { c.SessionGap = 0; c.ShapleyCap = 99; c.Limits.MaxID = 0 }, []string{
			"session_gap", "shapley_cap", "limits.max_id"}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			c := Default()
			tt.edit(&c)
			err := c.Validate()
			got := problemKeys(t, err)
			if !slices.Equal(got, tt.want) {
				t.Errorf("Validate() problems %q (%v), want %q", got, err, tt.want)
			}
		})
	}
}

// problemKeys returns the keys of the *FieldError values joined in err.
func problemKeys(t *testing.T, err error) []string {
	t.Helper()
	if err == nil {
		return nil
	}
	joined, ok := err.(interface{ Unwrap() []error })
	if !ok {
		t.Fatalf("Validate() error %T is not joined", err)
	}
	var keys []string
	for _, e := range joined.Unwrap() {
		var fe *FieldError
		if !errors.As(e, &fe) {
			t.Fatalf("problem %T %v is not a *FieldError", e, e)
		}
		if !strings.HasPrefix(e.Error(), fe.Key+": ") {
			t.Errorf("problem %q does not start with its key", e)
		}
		if first, _ := utf8.DecodeRuneInString(fe.Problem); !unicode.IsLower(first) {
			t.Errorf("problem %q does not start in lower case (Go error style)", e)
		}
		keys = append(keys, fe.Key)
	}
	return keys
}

func TestIsConversion(t *testing.T) {
	c := Default()
	c.GoalActions = []string{"order", "signup"}
	tests := []struct {
		action string
		want   bool
	}{{"order", true}, {"signup", true}, {"checkout", false}, {"Order", false}, {"", false}}
	for _, tt := range tests {
		if got := c.IsConversion(tt.action); got != tt.want {
			t.Errorf("IsConversion(%q) = %v, want %v", tt.action, got, tt.want)
		}
	}
}

// TestYAMLCommentsEveryKey reads YAML() back as a node tree: every key
// outside lists carries a comment, and the written keys are exactly the
// documented ones.
func TestYAMLCommentsEveryKey(t *testing.T) {
	text, err := Default().YAML()
	if err != nil {
		t.Fatal(err)
	}
	var doc yaml.Node
	if err := yaml.Unmarshal(text, &doc); err != nil {
		t.Fatal(err)
	}
	var written []string
	var walk func(n *yaml.Node, prefix string)
	walk = func(n *yaml.Node, prefix string) {
		for i := 0; i+1 < len(n.Content); i += 2 {
			key := n.Content[i]
			path := prefix + key.Value
			written = append(written, path)
			if doc, _ := keyDoc(path); key.HeadComment == "" || !strings.Contains(strings.Join(strings.Fields(key.HeadComment), " "), strings.Fields(doc)[0]) {
				t.Errorf("key %s has comment %q, want its documentation", path, key.HeadComment)
			}
			if n.Content[i+1].Kind == yaml.MappingNode {
				walk(n.Content[i+1], path+".")
			}
		}
	}
	walk(doc.Content[0], "")
	var documented []string
	for _, k := range keyDocs {
		documented = append(documented, k.Key)
	}
	if !slices.Equal(written, documented) {
		t.Errorf("YAML() keys\n%q\nwant the documented keys in order\n%q", written, documented)
	}
}

func nan() float64 {
	zero := 0.0
	return zero / zero
}

// TestUnknownKeyNamed (issue 9 item 10): an unknown key is named with its
// section and the file, not as "field bogus_key not found in type
// config.Config".
func TestUnknownKeyNamed(t *testing.T) {
	path := filepath.Join(t.TempDir(), "tl.yaml")
	if err := os.WriteFile(path, []byte("bogus_key: 1\nstore:\n  cache_user: 5\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	_, err := Load(path)
	for _, want := range []string{"configuration " + path, "line 1: unknown key bogus_key", "line 3: unknown key store.cache_user"} {
		if err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("Load: %v, want %q", err, want)
		}
	}
	if err != nil && strings.Contains(err.Error(), "not found in type") {
		t.Errorf("Load: %v still names a Go type", err)
	}
}
