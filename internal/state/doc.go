// Package state is touchledger's embedded store: a Badger directory holding
// per-user state, additive counter tables in time buckets at several
// resolutions, and input checkpoints. docs/storage.md documents the key and
// value layout byte by byte.
//
// Atomicity: Store.Commit writes one Commit (user states, counter deltas for
// every resolution, checkpoints and metadata) in a single Badger transaction,
// so the input position and the state it produced are always committed
// together. A Badger transaction holds at most MaxBatchSize bytes and
// MaxBatchCount entries (15 % of the memtable); callers size their commits
// with Limits.
//
// Badger locks its directory: one process at a time.
package state
