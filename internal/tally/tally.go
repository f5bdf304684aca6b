// Package tally holds additive counters: the only kind of aggregate
// touchledger stores. Every number a query reports is computed from sums of
// tally vectors over time buckets (and, across workers, over partitions), so
// merging is always plain addition.
//
// A counter is addressed by a Family (what is counted), the start of the
// finest time bucket it falls in, and Dims, a family-specific byte string
// naming the counted thing (a model and channel, a transition, a channel
// set). Its value is a Vec of three int64 whose meaning the family defines.
//
// Invariant: for any two batches a and b, applying a then b to the store
// gives the same state as applying their Merge; addition of int64 is exact and
// associative, so commit boundaries never change results.
package tally

import (
	"sort"
	"strings"
)

// Family names what a counter counts. Values are stored on disk: never renumber.
type Family uint8

const (
	// Totals: Dims "". Vec = {conversions, value micro-units, 0}.
	Totals Family = 1
	// Credit: Dims = model name + Sep + channel + Sep + campaign.
	// Vec = {credited nano-conversions, credited value micro-units, 0}.
	Credit Family = 2
	// Activity: Dims "". Vec = {sessions started, actions accepted, touches accepted}.
	Activity Family = 3
	// Numbers 4, 5 and 6 were set aside for channel transitions, channel
	// sets and action transitions; no release wrote them (those are derived
	// from SessionPaths and JourneyPaths at query time). Do not reuse them.
	// Funnel: Dims = depth reached as a decimal string ("0".."n").
	// Vec = {sessions, sessions that reached the basket step, of those converted}. Provisional.
	Funnel Family = 7
	// SessionPaths: Dims = path key. Vec = {sessions, converted sessions, 0}. Provisional.
	SessionPaths Family = 8
	// JourneyPaths: Dims = path key ending in a conversion or lost marker.
	// Vec = {journeys, conversions, value micro-units}. Provisional.
	JourneyPaths Family = 9
)

// PathStep is the smallest bucket (seconds) of the path families: journeys
// and sessions are counted at hour resolution and coarser, which keeps the
// number of counters small (a growing session moves within its hour as one
// net change).
const PathStep = 3600

// MinStep returns the smallest bucket length (seconds) a family is kept at;
// 0 means the finest resolution.
func MinStep(f Family) int64 {
	switch f {
	case SessionPaths, JourneyPaths:
		return PathStep
	}
	return 0
}

// Families lists every family, in storage order.
var Families = []Family{Totals, Credit, Activity, Funnel, SessionPaths, JourneyPaths}

// Sep separates parts of Dims. Event strings never hold control characters
// (the decoder rejects them), so Sep cannot occur inside a name.
const Sep = "\x1f"

// Join joins dims parts with Sep.
func Join(parts ...string) string { return strings.Join(parts, Sep) }

// Split splits dims into parts.
func Split(dims string) []string { return strings.Split(dims, Sep) }

// Vec is a counter value; the family defines the meaning of each slot.
type Vec [3]int64

// Add returns v + w.
func (v Vec) Add(w Vec) Vec { return Vec{v[0] + w[0], v[1] + w[1], v[2] + w[2]} }

// Sub returns v − w.
func (v Vec) Sub(w Vec) Vec { return Vec{v[0] - w[0], v[1] - w[1], v[2] - w[2]} }

// IsZero reports whether every slot is 0.
func (v Vec) IsZero() bool { return v == Vec{} }

// Key addresses a counter in a batch: family, finest bucket start (Unix
// seconds) and dims.
type Key struct {
	Family Family
	Bucket int64
	Dims   string
}

// Batch accumulates counter deltas in memory between commits.
// It is not safe for concurrent use.
type Batch struct {
	step int64 // finest bucket length in seconds
	m    map[Key]int32
	vals []Vec
}

// NewBatch returns an empty batch whose buckets are stepSeconds long.
func NewBatch(stepSeconds int64) *Batch {
	if stepSeconds <= 0 {
		panic("tally: bucket step must be positive")
	}
	return &Batch{step: stepSeconds, m: make(map[Key]int32)}
}

// Step returns the bucket length in seconds.
func (b *Batch) Step() int64 { return b.step }

// BucketOf returns the start (Unix seconds) of family f's bucket holding
// unixNano: the finest step, or MinStep(f) if that is coarser.
func (b *Batch) BucketOf(f Family, unixNano int64) int64 {
	step := max(b.step, MinStep(f))
	return FloorDiv(unixNano, step*1e9) * step
}

// Add adds v to the counter (f, bucket of unixNano, dims).
func (b *Batch) Add(f Family, unixNano int64, dims string, v Vec) {
	b.AddBucket(f, b.BucketOf(f, unixNano), dims, v)
}

// AddBucket adds v to the counter at an explicit bucket start.
func (b *Batch) AddBucket(f Family, bucket int64, dims string, v Vec) {
	k := Key{f, bucket, dims}
	if i, ok := b.m[k]; ok {
		p := &b.vals[i]
		p[0] += v[0]
		p[1] += v[1]
		p[2] += v[2]
		return
	}
	b.m[k] = int32(len(b.vals))
	b.vals = append(b.vals, v)
}

// Len returns the number of distinct counters touched.
func (b *Batch) Len() int { return len(b.m) }

// Range calls fn for every non-zero counter, in no particular order.
func (b *Batch) Range(fn func(Key, Vec)) {
	for k, i := range b.m {
		if v := b.vals[i]; !v.IsZero() {
			fn(k, v)
		}
	}
}

// Get returns the counter's value in this batch.
func (b *Batch) Get(f Family, bucket int64, dims string) Vec {
	if i, ok := b.m[Key{f, bucket, dims}]; ok {
		return b.vals[i]
	}
	return Vec{}
}

// Reset empties the batch, keeping its step.
func (b *Batch) Reset() {
	b.m = make(map[Key]int32, len(b.m))
	b.vals = b.vals[:0]
}

// FloorDiv is integer division rounding towards negative infinity.
func FloorDiv(a, b int64) int64 {
	q := a / b
	if (a%b != 0) && ((a < 0) != (b < 0)) {
		q--
	}
	return q
}

// Entry is one dims/value pair of a bucket.
type Entry struct {
	Dims string
	Vec  Vec
}

// Table is the content of one (family, bucket): a set of dims with values.
type Table map[string]Vec

// AddTable adds every entry of o to t.
func (t Table) AddTable(o Table) {
	for d, v := range o {
		t[d] = t[d].Add(v)
	}
}

// Sorted returns the non-zero entries sorted by dims.
func (t Table) Sorted() []Entry {
	out := make([]Entry, 0, len(t))
	for d, v := range t {
		if !v.IsZero() {
			out = append(out, Entry{d, v})
		}
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Dims < out[j].Dims })
	return out
}
