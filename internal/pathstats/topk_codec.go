package pathstats

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"
)

// topKVersion is the first byte of an encoded TopK.
const topKVersion = 1

// ErrCorrupt is returned (wrapped) by UnmarshalBinary when the bytes are not
// a valid TopK encoding.
var ErrCorrupt = errors.New("pathstats: corrupt top-k encoding")

// AppendBinary appends the encoding of t to b:
//
//	version byte (1) | uvarint capacity | uvarint total | uvarint k |
//	k × (uvarint len(key) | key | uvarint Δcount | uvarint error)
//
// The k counters are written in Items order (Count descending, then Key
// ascending); Δcount is the first count itself and then the previous count
// minus this one, so the usually small differences take one byte. Equal
// summaries encode to equal bytes.
func (t *TopK) AppendBinary(b []byte) ([]byte, error) {
	b = append(b, topKVersion)
	b = binary.AppendUvarint(b, uint64(t.capacity))
	b = binary.AppendUvarint(b, uint64(t.total))
	items := t.Items()
	b = binary.AppendUvarint(b, uint64(len(items)))
	var prev int64
	for i, it := range items {
		b = binary.AppendUvarint(b, uint64(len(it.Key)))
		b = append(b, it.Key...)
		delta := it.Count
		if i > 0 {
			delta = prev - it.Count
		}
		b = binary.AppendUvarint(b, uint64(delta))
		b = binary.AppendUvarint(b, uint64(it.Error))
		prev = it.Count
	}
	return b, nil
}

// MarshalBinary returns the encoding described at AppendBinary.
func (t *TopK) MarshalBinary() ([]byte, error) {
	return t.AppendBinary(nil)
}

// UnmarshalBinary replaces t with the summary encoded in b. It checks the
// encoding and the summary's invariants (capacity in [1, MaxTopKCapacity],
// at most capacity distinct keys in Items order, every count >= 1 and
// >= its error, Σcounts <= total; a summary that is not full has no errors
// and Σcounts = total; a full one has every error <= its smallest count) and
// returns an error wrapping ErrCorrupt, leaving t unchanged, if any fails.
func (t *TopK) UnmarshalBinary(b []byte) error {
	if len(b) == 0 {
		return fmt.Errorf("%w: empty", ErrCorrupt)
	}
	if b[0] != topKVersion {
		return fmt.Errorf("%w: version %d", ErrCorrupt, b[0])
	}
	r := reader{b: b[1:]}
	capacity := r.uvarint("capacity", MaxTopKCapacity)
	total := int64(r.uvarint("total", math.MaxInt64))
	k := r.uvarint("counter count", capacity)
	if r.err != nil {
		return r.err
	}
	if capacity < 1 {
		return fmt.Errorf("%w: capacity 0", ErrCorrupt)
	}
	if k > uint64(len(r.b))/3 { // every counter takes at least 3 bytes
		return fmt.Errorf("%w: %d counters in %d bytes", ErrCorrupt, k, len(r.b))
	}
	items := make([]Item, k)
	seen := make(map[string]struct{}, k)
	var sum, prev int64
	for i := range items {
		keyLen := r.uvarint("key length", math.MaxInt32)
		if r.err != nil {
			return r.err
		}
		if keyLen > uint64(len(r.b)) {
			return fmt.Errorf("%w: key of %d bytes in %d", ErrCorrupt, keyLen, len(r.b))
		}
		key := string(r.b[:keyLen])
		r.b = r.b[keyLen:]
		var count int64
		if i == 0 {
			count = int64(r.uvarint("count", math.MaxInt64))
		} else {
			count = prev - int64(r.uvarint("count step", uint64(prev)))
		}
		errBound := int64(r.uvarint("error", math.MaxInt64))
		if r.err != nil {
			return r.err
		}
		switch {
		case count < 1:
			return fmt.Errorf("%w: counter %d has count %d", ErrCorrupt, i, count)
		case errBound > count:
			return fmt.Errorf("%w: counter %d has error %d above count %d", ErrCorrupt, i, errBound, count)
		case i > 0 && count == prev && key <= items[i-1].Key:
			return fmt.Errorf("%w: counter %d out of order", ErrCorrupt, i)
		}
		if _, dup := seen[key]; dup {
			return fmt.Errorf("%w: key %q repeated", ErrCorrupt, key)
		}
		seen[key] = struct{}{}
		if sum > total-count {
			return fmt.Errorf("%w: counts exceed total %d", ErrCorrupt, total)
		}
		sum += count
		items[i] = Item{Key: key, Count: count, Error: errBound}
		prev = count
	}
	if len(r.b) != 0 {
		return fmt.Errorf("%w: %d trailing bytes", ErrCorrupt, len(r.b))
	}
	if k < capacity {
		if sum != total {
			return fmt.Errorf("%w: summary not full but counts sum to %d of total %d", ErrCorrupt, sum, total)
		}
		for i, it := range items {
			if it.Error != 0 {
				return fmt.Errorf("%w: summary not full but counter %d has error %d", ErrCorrupt, i, it.Error)
			}
		}
	} else {
		for i, it := range items {
			if it.Error > prev {
				return fmt.Errorf("%w: counter %d has error %d above the smallest count %d", ErrCorrupt, i, it.Error, prev)
			}
		}
	}
	var fresh TopK
	fresh.reset(int(capacity), total, items)
	*t = fresh
	return nil
}

// reader decodes uvarints, remembering the first error.
type reader struct {
	b   []byte
	err error
}

func (r *reader) uvarint(what string, limit uint64) uint64 {
	if r.err != nil {
		return 0
	}
	v, n := binary.Uvarint(r.b)
	if n <= 0 {
		r.err = fmt.Errorf("%w: truncated %s", ErrCorrupt, what)
		return 0
	}
	if v > limit {
		r.err = fmt.Errorf("%w: %s %d above %d", ErrCorrupt, what, v, limit)
		return 0
	}
	r.b = r.b[n:]
	return v
}
