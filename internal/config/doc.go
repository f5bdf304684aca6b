// Package config reads touchledger's YAML configuration and holds its
// documented defaults.
//
// # Input and output
//
// Parse (text) and Load (a file) start from Default and overlay what the
// YAML names; a file only needs the keys it changes, and a list replaces the
// default list. Unknown keys are errors (yaml.v3 KnownFields), so a misspelt
// key never silently keeps its default. The result is validated. Config.YAML
// writes the effective configuration back, each key with a comment; Parse
// reads it to the same Config. docs/configuration.md lists every key, its
// default and meaning.
//
// Durations (Duration, ParseDuration) are written as Go durations ("30m",
// "1h30m") with an optional leading whole number of days: "30d" = 720h,
// "1d12h" = 36h. A day is 24 hours. Durations are never negative.
//
// # Invariants of a valid Config (Validate)
//
// Time settings are positive (lateness may be 0) and view_lookback ≤
// click_lookback; goal actions and funnel steps are non-empty lists of
// distinct names that fit limits.max_name; position weights are ≥ 0 and sum
// to 1 within 1e-9; markov_max_order is 1..4 and shapley_cap 1..20; store
// resolutions are named uniquely and sorted by step, each step a whole number
// of seconds dividing the next, so that a coarse bucket is an exact sum of
// fine ones; the alert interval is a multiple of the finest step; caches and
// commit sizes are positive (the memtable at least 8 MiB: Badger's default
// 1 MiB value threshold must fit in 15 % of it). Validate reports every
// problem, each a *FieldError naming its dotted key.
//
// The package does no I/O except Load reading its one file.
package config
