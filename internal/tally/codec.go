package tally

import (
	"encoding/binary"
	"errors"
	"fmt"
)

// tableVersion is the first byte of an encoded table.
const tableVersion = 1

// ErrCorrupt is returned when an encoded table cannot be decoded.
var ErrCorrupt = errors.New("tally: corrupt table encoding")

// AppendTable appends the binary form of t to dst:
//
//	version byte (1) | uvarint n | n × (uvarint len(dims) | dims | 3 × varint slot)
//
// Entries are in no particular order; zero entries are left out.
func AppendTable(dst []byte, t Table) []byte {
	n := 0
	for _, v := range t {
		if !v.IsZero() {
			n++
		}
	}
	dst = append(dst, tableVersion)
	dst = binary.AppendUvarint(dst, uint64(n))
	for d, v := range t {
		if v.IsZero() {
			continue
		}
		dst = binary.AppendUvarint(dst, uint64(len(d)))
		dst = append(dst, d...)
		for _, x := range v {
			dst = binary.AppendVarint(dst, x)
		}
	}
	return dst
}

// DecodeTable adds the entries encoded in b to t (so several buckets can be
// summed into one table).
func DecodeTable(b []byte, t Table) error {
	if len(b) == 0 {
		return nil
	}
	if b[0] != tableVersion {
		return fmt.Errorf("%w: version %d", ErrCorrupt, b[0])
	}
	b = b[1:]
	n, k := binary.Uvarint(b)
	if k <= 0 || n > uint64(len(b)) {
		return ErrCorrupt
	}
	b = b[k:]
	for i := uint64(0); i < n; i++ {
		l, k := binary.Uvarint(b)
		if k <= 0 || l > uint64(len(b)-k) {
			return ErrCorrupt
		}
		dims := string(b[k : k+int(l)])
		b = b[k+int(l):]
		var v Vec
		for j := range v {
			x, k := binary.Varint(b)
			if k <= 0 {
				return ErrCorrupt
			}
			v[j] = x
			b = b[k:]
		}
		t[dims] = t[dims].Add(v)
	}
	if len(b) != 0 {
		return fmt.Errorf("%w: %d trailing bytes", ErrCorrupt, len(b))
	}
	return nil
}
