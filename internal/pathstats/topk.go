package pathstats

import (
	"cmp"
	"fmt"
	"slices"
	"strings"
)

// MaxTopKCapacity is the largest capacity NewTopK and UnmarshalBinary accept.
const MaxTopKCapacity = 1 << 24

// TopK is a weighted Space-Saving summary (Metwally, Agrawal & El Abbadi
// 2005) of capacity m: it keeps at most m counters and answers the most
// frequent items of a stream with a per-item overestimation bound, in memory
// that does not grow with the number of distinct items. Summaries merge (see
// Merge). The package documentation states the update and merge rules and
// the guarantees. A TopK is not safe for concurrent use. The zero TopK has
// capacity 0 and is only useful as the target of UnmarshalBinary; build
// others with NewTopK.
type TopK struct {
	capacity int
	total    int64
	counters []counter        // at most capacity, in no particular order
	heap     []int32          // indices into counters; min-heap under counterLess
	index    map[string]int32 // key -> index into counters
}

type counter struct {
	key   string
	count int64
	err   int64
	pos   int32 // position in heap
}

// Item is one counter of a TopK: the item's true count f satisfies
// Count − Error <= f <= Count.
type Item struct {
	Key   string
	Count int64
	Error int64
}

// NewTopK returns an empty summary with m counters. It panics if m is
// outside [1, MaxTopKCapacity].
func NewTopK(m int) *TopK {
	if m < 1 || m > MaxTopKCapacity {
		panic(fmt.Sprintf("pathstats: top-k capacity %d outside [1, %d]", m, MaxTopKCapacity))
	}
	return &TopK{capacity: m, index: make(map[string]int32)}
}

// Cap returns the number of counters m.
func (t *TopK) Cap() int { return t.capacity }

// Len returns the number of counters in use (at most Cap).
func (t *TopK) Len() int { return len(t.counters) }

// Total returns N, the sum of all observed weights (including merged
// summaries' totals).
func (t *TopK) Total() int64 { return t.total }

// UnlistedMax returns an upper bound on the true count of every item that
// Items does not list: the smallest count when all counters are in use, else
// 0 (until the summary fills, every item seen has a counter).
func (t *TopK) UnlistedMax() int64 {
	if len(t.counters) < t.capacity || len(t.heap) == 0 {
		return 0
	}
	return t.counters[t.heap[0]].count
}

// Observe adds weight n to item. n == 0 does nothing; it panics if n < 0
// (Space-Saving cannot delete). When item has no counter and all counters are
// in use, the counter with the smallest count is reassigned, ties broken
// towards the lexicographically largest key: the new item gets count min+n
// and error min.
func (t *TopK) Observe(item string, n int64) {
	if n <= 0 {
		if n < 0 {
			panic(fmt.Sprintf("pathstats: negative top-k weight %d", n))
		}
		return
	}
	if t.capacity == 0 {
		panic("pathstats: TopK used before NewTopK or UnmarshalBinary")
	}
	t.total += n
	if i, ok := t.index[item]; ok {
		t.counters[i].count += n
		t.down(int(t.counters[i].pos))
		return
	}
	if len(t.counters) < t.capacity {
		i := int32(len(t.counters))
		t.counters = append(t.counters, counter{key: strings.Clone(item), count: n, pos: int32(len(t.heap))})
		t.heap = append(t.heap, i)
		t.index[t.counters[i].key] = i
		t.up(len(t.heap) - 1)
		return
	}
	i := t.heap[0]
	c := &t.counters[i]
	delete(t.index, c.key)
	c.key = strings.Clone(item)
	c.err = c.count
	c.count += n
	t.index[c.key] = i
	t.down(0)
}

// Items returns the counters sorted by Count descending, then Key ascending.
func (t *TopK) Items() []Item {
	items := make([]Item, len(t.counters))
	for i, c := range t.counters {
		items[i] = Item{Key: c.key, Count: c.count, Error: c.err}
	}
	slices.SortFunc(items, compareItems)
	return items
}

// Guaranteed returns the items that are certainly among the true top k: of
// the first k items in Items order, those whose lower bound Count − Error is
// at least the (k+1)-th largest count (UnlistedMax when fewer than k+1
// items are listed). No item outside the first k can then exceed them
// (Metwally et al. 2005, guaranteed top-k).
func (t *TopK) Guaranteed(k int) []Item {
	items := t.Items()
	if k <= 0 {
		return nil
	}
	threshold := t.UnlistedMax()
	if len(items) > k {
		threshold = items[k].Count
	}
	var out []Item
	for _, it := range items[:min(k, len(items))] {
		if it.Count-it.Error >= threshold {
			out = append(out, it)
		}
	}
	return out
}

// Merge adds the summary o into t (Agarwal et al. 2012 mergeability, in the
// Space-Saving form described in the package documentation): every key of
// either summary gets the sum of its upper bounds, an absent key counting
// its summary's UnlistedMax, and the sum of its errors likewise; the
// Cap() largest merged counts are kept (ties to the smaller key), where the
// merged capacity is min(t.Cap(), o.Cap()). Counts stay upper bounds, so
// every Space-Saving guarantee survives the merge and Observe may continue
// afterwards. t.Merge(t) doubles t; a nil o does nothing.
func (t *TopK) Merge(o *TopK) {
	if o == nil || o.capacity == 0 {
		return
	}
	if t.capacity == 0 {
		panic("pathstats: TopK used before NewTopK or UnmarshalBinary")
	}
	capacity := min(t.capacity, o.capacity)
	unlistedT, unlistedO := t.UnlistedMax(), o.UnlistedMax()
	merged := make([]Item, 0, len(t.counters)+len(o.counters))
	for _, c := range t.counters {
		it := Item{Key: c.key, Count: c.count + unlistedO, Error: c.err + unlistedO}
		if j, ok := o.index[c.key]; ok {
			it.Count = c.count + o.counters[j].count
			it.Error = c.err + o.counters[j].err
		}
		merged = append(merged, it)
	}
	for _, c := range o.counters {
		if _, ok := t.index[c.key]; !ok {
			merged = append(merged, Item{Key: c.key, Count: c.count + unlistedT, Error: c.err + unlistedT})
		}
	}
	slices.SortFunc(merged, compareItems)
	total := t.total + o.total
	t.reset(capacity, total, merged[:min(capacity, len(merged))])
}

// reset replaces t's contents with items (distinct keys, at most capacity).
func (t *TopK) reset(capacity int, total int64, items []Item) {
	t.capacity, t.total = capacity, total
	t.counters = make([]counter, len(items), min(capacity, max(len(items), 16)))
	t.heap = make([]int32, len(items), cap(t.counters))
	t.index = make(map[string]int32, len(items))
	for i, it := range items {
		t.counters[i] = counter{key: it.Key, count: it.Count, err: it.Error, pos: int32(i)}
		t.heap[i] = int32(i)
		t.index[it.Key] = int32(i)
	}
	for i := len(t.heap)/2 - 1; i >= 0; i-- {
		t.down(i)
	}
}

func compareItems(a, b Item) int {
	if c := cmp.Compare(b.Count, a.Count); c != 0 {
		return c
	}
	return strings.Compare(a.Key, b.Key)
}

// less orders the heap: smaller count first, then the larger key, so the
// root is the counter Observe reassigns.
func (t *TopK) less(a, b int32) bool {
	ca, cb := &t.counters[a], &t.counters[b]
	if ca.count != cb.count {
		return ca.count < cb.count
	}
	return ca.key > cb.key
}

func (t *TopK) swap(i, j int) {
	t.heap[i], t.heap[j] = t.heap[j], t.heap[i]
	t.counters[t.heap[i]].pos = int32(i)
	t.counters[t.heap[j]].pos = int32(j)
}

func (t *TopK) up(i int) {
	for i > 0 {
		parent := (i - 1) / 2
		if !t.less(t.heap[i], t.heap[parent]) {
			return
		}
		t.swap(i, parent)
		i = parent
	}
}

func (t *TopK) down(i int) {
	n := len(t.heap)
	for {
		smallest := i
		if l := 2*i + 1; l < n && t.less(t.heap[l], t.heap[smallest]) {
			smallest = l
		}
		if r := 2*i + 2; r < n && t.less(t.heap[r], t.heap[smallest]) {
			smallest = r
		}
		if smallest == i {
			return
		}
		t.swap(i, smallest)
		i = smallest
	}
}
