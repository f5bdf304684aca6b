package config

// keyDocs explains every configuration key, in file order. Config.YAML writes
// these as comments, and docs/configuration.md shows them beside the defaults
// (TestConfigurationDoc keeps the page in step with this table).
var keyDocs = []struct{ Key, Doc string }{
	{"currency", `ISO 4217 code all values are in; events naming another currency are rejected (reason currency). Empty accepts any currency, with no conversion.`},
	{"session_gap", `An action whose gap to the user's previous action is at least this starts a new session.`},
	{"lateness", `How far event time may trail the largest time seen. The watermark is that time minus the lateness; older events are rejected as late. 0 means arrival order.`},
	{"goal_actions", `Actions that count as conversions. A conversion credits the journey's touches and ends the journey.`},
	{"funnel_steps", `The in-order funnel's steps, in order; no repeats.`},
	{"basket_step", `Sessions that reach this action and do not convert count as basket abandonment.`},
	{"click_lookback", `A click is credited for a conversion at most this long after it.`},
	{"view_lookback", `A view is credited for a conversion at most this long after it; at most click_lookback.`},
	{"journey_timeout", `A journey whose last touch is more than this before the next touch or conversion ends without conversion (a lost journey, ending in @lost).`},
	{"direct_channel", `Channel credited in full when a conversion has no eligible touch; last-marketing skips it.`},
	{"half_life", `Time-decay half-life: a touch Δt before the conversion weighs 2^(−Δt/half_life).`},
	{"position_weights", `Position-based model for three or more touches: first, middle (split evenly over the middle touches) and last share; they sum to 1. One touch gets all, two touches half each.`},
	{"position_weights.first", `Share of the first touch.`},
	{"position_weights.middle", `Share split evenly over the touches between first and last.`},
	{"position_weights.last", `Share of the last touch.`},
	{"dedup_horizon", `An event whose id was accepted within this much event time is a duplicate and changes nothing.`},
	{"markov_max_order", `Highest Markov-chain order kept, 1 to 4; transition counts are stored for every order up to it.`},
	{"collapse_repeats", `Collapse consecutive repeats of a channel in Markov paths (A → A → B counts as A → B).`},
	{"shapley_cap", `Most channels that are Shapley players, 1 to 20 (the work grows as 2^players); the rest are pooled as "other".`},
	{"path_max_len", `Most steps a top path shows; longer paths are cut with an ellipsis. At least 2.`},
	{"alert", `Abandonment spike alerts: an EWMA control chart (Roberts 1959; NIST/SEMATECH e-Handbook 6.3.2.4) over the abandonment rate per interval, limits from the binomial variance p(1−p)/n (p-chart, 6.3.3.2).`},
	{"alert.interval", `Width of the intervals the rate is computed over, by session end; a multiple of the finest store step.`},
	{"alert.lambda", `EWMA weight of the newest interval, 0 < λ ≤ 1.`},
	{"alert.limit", `L: width of the control limits in standard deviations of the EWMA statistic.`},
	{"alert.min_sessions", `Fewest sessions an interval needs to be judged.`},
	{"alert.baseline", `History pooled for the in-control abandonment rate; at least one interval.`},
	{"alert.close_after", `Consecutive intervals below the limit that close an open alert.`},
	{"alert.step", `Funnel step whose abandonment is watched: sessions that reached it and not the last step.`},
	{"alert.target", `Fixed in-control abandonment rate instead of the rolling baseline; 0 uses the rolling baseline.`},
	{"store", `The embedded store (Badger) and the commit cadence.`},
	{"store.resolutions", `Bucket sizes counters are kept at, finest first: name, step (each step divides the next), retention (0 keeps forever; otherwise at least one step). Names are unique.`},
	{"store.cache_users", `Users whose session and journey state stay in memory; the rest live in the store.`},
	{"store.memtable_mib", `Badger memtable size in MiB, at least 8; one commit must fit in 15 % of it.`},
	{"store.block_cache_mib", `Badger block cache in MiB.`},
	{"store.index_cache_mib", `Badger index cache in MiB (at least 1, so memory stays bounded).`},
	{"store.commit_events", `Most input events one commit covers.`},
	{"store.commit_interval", `Longest wall time between commits while input flows.`},
	{"store.min_free_mib", `Free-space reserve of the data directory's disk, in MiB: the reserve is the larger of this and min_free_percent. Below it a live worker stops fetching and /readyz is not ready until space returns; a replay stops after committing what it read (run it again to resume). 0 with min_free_percent 0 disables.`},
	{"store.min_free_percent", `Free-space reserve as a percentage of the disk's size (see min_free_mib).`},
	{"limits", `Size limits of an input event, in bytes; larger events are rejected (too_large or bad_field).`},
	{"limits.max_payload", `Largest payload, at least 256.`},
	{"limits.max_id", `Longest event id.`},
	{"limits.max_user", `Longest user id.`},
	{"limits.max_name", `Longest channel, campaign, action or currency; goal actions, funnel steps, basket step and direct channel must fit in it.`},
	{"privacy", `Keyed pseudonyms for user ids.`},
	{"privacy.key_file", `File with the pseudonymisation key (>= 32 bytes or 64 hex digits, mode 600); empty stores raw ids unless TOUCHLEDGER_KEY_FILE is set.`},
	{"privacy.key_version", `Version written into every pseudonym; raise it when rotating the key.`},
	{"rejects", `Rotation of the replay rejects file.`},
	{"rejects.max_mib", `Rotate the rejects file at the start of a replay when it is larger than this; 0 never rotates.`},
	{"rejects.keep", `Rotated rejects files kept.`},
	{"clock", `Guards event time against one event far ahead of the rest (reason future). Event times must also lie in the years 1970 to 2099.`},
	{"clock.max_future", `Live input rejects an event more than this ahead of the wall clock. 0 disables.`},
	{"clock.max_jump", `Replay holds an event more than this ahead of the largest event time seen aside until 8 held events within this of each other confirm the jump; one unconfirmed 4096 inputs later, or at the end of the input, is rejected as future. 0 disables.`},
}

// keyDoc returns the explanation of a dotted key.
func keyDoc(key string) (string, bool) {
	for _, k := range keyDocs {
		if k.Key == key {
			return k.Doc, true
		}
	}
	return "", false
}
