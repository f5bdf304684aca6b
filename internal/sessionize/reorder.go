package sessionize

import (
	"container/heap"

	"github.com/touchledger/touchledger/internal/event"
)

// Item is an event waiting in the reorder buffer, with the input position it
// was read from (a line number or a stream sequence).
type Item struct {
	Event event.Event
	Pos   uint64
	t     int64  // event time, Unix nanoseconds
	seq   uint64 // arrival order, breaks ties in event time
}

// Reorder releases events in event-time order. The watermark is the largest
// event time seen minus the allowed lateness. An event older than the
// watermark is late (the caller rejects it); every other event waits until the
// watermark passes its time. Ties in event time leave in arrival order, so with
// lateness 0 the order is arrival order.
//
// Invariant: every released event has time < watermark, and every event still
// buffered has time >= watermark; released events are ordered by
// (time, arrival).
type Reorder struct {
	lateness int64 // nanoseconds
	maxSeen  int64 // largest event time seen, Unix nanoseconds; minInt64 before any
	floor    int64 // lower bound for the watermark (after a drain)
	seq      uint64
	h        itemHeap
}

const minInt64 = -1 << 63

// NewReorder returns an empty buffer with the given allowed lateness.
func NewReorder(latenessNanos int64) *Reorder {
	return &Reorder{lateness: latenessNanos, maxSeen: minInt64, floor: minInt64}
}

// Restore sets the largest event time seen and the watermark floor, as
// committed earlier. Call it before pushing anything.
func (r *Reorder) Restore(maxSeen, floor int64) { r.maxSeen, r.floor = maxSeen, floor }

// MaxSeen returns the largest event time seen (Unix nanoseconds), or
// math.MinInt64 before any event.
func (r *Reorder) MaxSeen() int64 { return r.maxSeen }

// Floor returns the watermark floor set by Drain.
func (r *Reorder) Floor() int64 { return r.floor }

// Watermark returns max(largest event time seen − lateness, floor).
func (r *Reorder) Watermark() int64 {
	if r.maxSeen == minInt64 {
		return r.floor
	}
	w := r.maxSeen - r.lateness
	if w < r.floor {
		w = r.floor
	}
	return w
}

// Late reports whether an event at unixNano is older than the watermark.
func (r *Reorder) Late(unixNano int64) bool { return unixNano < r.Watermark() }

// Push adds an event that is not late and advances the watermark. It does not
// release anything; call Release.
func (r *Reorder) Push(e event.Event, pos uint64) {
	t := e.Time.UnixNano()
	if t > r.maxSeen {
		r.maxSeen = t
	}
	r.seq++
	heap.Push(&r.h, Item{Event: e, Pos: pos, t: e.Time.UnixNano(), seq: r.seq})
}

// Readmit puts back an event that was buffered when the state was committed,
// without moving the watermark (it was counted then).
func (r *Reorder) Readmit(e event.Event, pos uint64) {
	r.seq++
	heap.Push(&r.h, Item{Event: e, Pos: pos, t: e.Time.UnixNano(), seq: r.seq})
}

// Release calls fn, in event-time order, for every buffered event older than
// the watermark.
func (r *Reorder) Release(fn func(Item)) {
	w := r.Watermark()
	for len(r.h) > 0 && r.h[0].t < w {
		fn(heap.Pop(&r.h).(Item))
	}
}

// Drain releases every buffered event in order and raises the watermark floor
// to the largest event time seen, so that nothing older can be accepted later
// (end of a replay: the input is complete).
func (r *Reorder) Drain(fn func(Item)) {
	for len(r.h) > 0 {
		fn(heap.Pop(&r.h).(Item))
	}
	if r.maxSeen > r.floor {
		r.floor = r.maxSeen
	}
}

// Len returns the number of buffered events.
func (r *Reorder) Len() int { return len(r.h) }

// Positions appends the input positions of the buffered events to dst.
func (r *Reorder) Positions(dst []uint64) []uint64 {
	for _, it := range r.h {
		dst = append(dst, it.Pos)
	}
	return dst
}

type itemHeap []Item

func (h itemHeap) Len() int { return len(h) }
func (h itemHeap) Less(i, j int) bool {
	if h[i].t != h[j].t {
		return h[i].t < h[j].t
	}
	return h[i].seq < h[j].seq
}
func (h itemHeap) Swap(i, j int) { h[i], h[j] = h[j], h[i] }
func (h *itemHeap) Push(x any)   { *h = append(*h, x.(Item)) }
func (h *itemHeap) Pop() any {
	old := *h
	n := len(old)
	it := old[n-1]
	old[n-1] = Item{}
	*h = old[:n-1]
	return it
}
