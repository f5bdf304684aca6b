package sessionize

import (
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
//
// Events live in a slab and the heap orders small (time, arrival, slot)
// entries, so buffering allocates nothing once the slab has grown.
type Reorder struct {
	lateness int64 // nanoseconds
	maxSeen  int64 // largest event time seen, Unix nanoseconds; minInt64 before any
	floor    int64 // lower bound for the watermark (after a drain)
	seq      uint64
	slab     []Item
	free     []int32
	h        []slot
}

type slot struct {
	t   int64
	seq uint64
	i   int32
}

func (a slot) less(b slot) bool { return a.t < b.t || (a.t == b.t && a.seq < b.seq) }

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
func (r *Reorder) Push(e *event.Event, pos uint64) {
	t := e.Time.UnixNano()
	if t > r.maxSeen {
		r.maxSeen = t
	}
	r.add(e, pos, t)
}

// Advance lets event time pass to t without an event (live input that is
// quiet): the watermark floor rises to t − lateness, so buffered events are
// released and sessions close as if an event at t had arrived. The largest
// event time seen is not changed: it stays the time of a real event, so
// answers ending at it ("last 7 days") never reach into time no event
// came from.
func (r *Reorder) Advance(t int64) {
	if w := t - r.lateness; w > r.floor {
		r.floor = w
	}
}

// Readmit puts back an event that was buffered when the state was committed,
// without moving the watermark (it was counted then).
func (r *Reorder) Readmit(e *event.Event, pos uint64) { r.add(e, pos, e.Time.UnixNano()) }

func (r *Reorder) add(e *event.Event, pos uint64, t int64) {
	var i int32
	if n := len(r.free); n > 0 {
		i = r.free[n-1]
		r.free = r.free[:n-1]
	} else {
		r.slab = append(r.slab, Item{})
		i = int32(len(r.slab) - 1)
	}
	r.seq++
	r.slab[i] = Item{Event: *e, Pos: pos, t: t, seq: r.seq}
	r.h = append(r.h, slot{t, r.seq, i})
	r.up(len(r.h) - 1)
}

// pop removes the earliest event; fn gets a pointer valid until the next call.
func (r *Reorder) pop() *Item {
	top := r.h[0]
	n := len(r.h) - 1
	r.h[0] = r.h[n]
	r.h = r.h[:n]
	if n > 0 {
		r.down(0)
	}
	r.free = append(r.free, top.i)
	return &r.slab[top.i]
}

func (r *Reorder) up(j int) {
	for j > 0 {
		i := (j - 1) / 2
		if !r.h[j].less(r.h[i]) {
			break
		}
		r.h[i], r.h[j] = r.h[j], r.h[i]
		j = i
	}
}

func (r *Reorder) down(i int) {
	n := len(r.h)
	for {
		j := 2*i + 1
		if j >= n {
			return
		}
		if k := j + 1; k < n && r.h[k].less(r.h[j]) {
			j = k
		}
		if !r.h[j].less(r.h[i]) {
			return
		}
		r.h[i], r.h[j] = r.h[j], r.h[i]
		i = j
	}
}

// Release calls fn, in event-time order, for every buffered event older than
// the watermark. The item is only valid during the call.
func (r *Reorder) Release(fn func(*Item)) {
	w := r.Watermark()
	for len(r.h) > 0 && r.h[0].t < w {
		fn(r.pop())
	}
}

// Drain releases every buffered event in order and raises the watermark floor
// to the largest event time seen, so that nothing older can be accepted later
// (end of a replay: the input is complete).
func (r *Reorder) Drain(fn func(*Item)) {
	for len(r.h) > 0 {
		fn(r.pop())
	}
	if r.maxSeen > r.floor {
		r.floor = r.maxSeen
	}
}

// CountUser returns how many buffered events belong to user.
func (r *Reorder) CountUser(user string) int {
	n := 0
	for _, s := range r.h {
		if r.slab[s.i].Event.User == user {
			n++
		}
	}
	return n
}

// Len returns the number of buffered events.
func (r *Reorder) Len() int { return len(r.h) }

// Positions appends the input positions of the buffered events to dst.
func (r *Reorder) Positions(dst []uint64) []uint64 {
	for _, s := range r.h {
		dst = append(dst, r.slab[s.i].Pos)
	}
	return dst
}
