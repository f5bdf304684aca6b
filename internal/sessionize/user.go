package sessionize

import (
	"encoding/binary"
	"errors"
	"fmt"
)

// UserState is everything touchledger remembers about one person between
// events: the open session, the open journey, and the ids of recent events
// for de-duplication. It is stored per user (see docs/storage.md) and kept in
// a bounded cache while in use.
type UserState struct {
	LastAction   int64    // time of the last action, Unix ns; 0 = no action yet
	SessionStart int64    // start of the current session, Unix ns
	Sessions     uint32   // sessions started so far
	Path         []string // actions of the current session, in order (at most MaxPath kept)
	PathLen      uint32   // actions in the current session, including those past MaxPath
	Touches      []Touch  // touches of the open journey, in time order
	Seen         []Seen   // recent event ids, oldest first, within the de-duplication horizon
}

// Touch is one touch of a journey.
type Touch struct {
	Channel  string
	Campaign string
	Time     int64 // Unix ns
	View     bool
}

// Seen remembers an accepted event id by its 64-bit hash and event time.
type Seen struct {
	Hash uint64
	Time int64 // Unix ns
}

// HasSeen reports whether an event id hash was accepted for this user within
// the horizon.
func (u *UserState) HasSeen(h uint64) bool {
	for i := len(u.Seen) - 1; i >= 0; i-- {
		if u.Seen[i].Hash == h {
			return true
		}
	}
	return false
}

const userVersion = 1

// SizeEstimate returns an upper bound of len(u.AppendBinary(nil)).
func (u *UserState) SizeEstimate() int64 {
	n := 1 + 3*10 + 2*5
	for _, a := range u.Path {
		n += len(a) + 2
	}
	for _, t := range u.Touches {
		n += len(t.Channel) + len(t.Campaign) + 4 + 10 + 1
	}
	n += len(u.Seen) * 18
	return int64(n)
}

// ErrCorruptUser is returned when a stored user state cannot be decoded.
var ErrCorruptUser = errors.New("sessionize: corrupt user state")

// AppendBinary appends the stored form of u to dst:
//
//	version (1) | varint LastAction | varint SessionStart | uvarint Sessions |
//	uvarint PathLen | uvarint n | n × str | uvarint m | m × (str Channel | str Campaign | varint Time | byte View) |
//	uvarint k | k × (8-byte big-endian Hash | varint Time)
//
// where str is uvarint length + bytes.
func (u *UserState) AppendBinary(dst []byte) []byte {
	dst = append(dst, userVersion)
	dst = binary.AppendVarint(dst, u.LastAction)
	dst = binary.AppendVarint(dst, u.SessionStart)
	dst = binary.AppendUvarint(dst, uint64(u.Sessions))
	dst = binary.AppendUvarint(dst, uint64(u.PathLen))
	dst = binary.AppendUvarint(dst, uint64(len(u.Path)))
	for _, a := range u.Path {
		dst = appendStr(dst, a)
	}
	dst = binary.AppendUvarint(dst, uint64(len(u.Touches)))
	for _, t := range u.Touches {
		dst = appendStr(dst, t.Channel)
		dst = appendStr(dst, t.Campaign)
		dst = binary.AppendVarint(dst, t.Time)
		if t.View {
			dst = append(dst, 1)
		} else {
			dst = append(dst, 0)
		}
	}
	dst = binary.AppendUvarint(dst, uint64(len(u.Seen)))
	for _, s := range u.Seen {
		dst = binary.BigEndian.AppendUint64(dst, s.Hash)
		dst = binary.AppendVarint(dst, s.Time)
	}
	return dst
}

func appendStr(dst []byte, s string) []byte {
	dst = binary.AppendUvarint(dst, uint64(len(s)))
	return append(dst, s...)
}

// UnmarshalBinary decodes a stored user state, replacing u.
func (u *UserState) UnmarshalBinary(b []byte) error {
	d := decoder{b: b}
	if v := d.byte(); v != userVersion {
		if d.err != nil {
			return d.err
		}
		return fmt.Errorf("%w: version %d", ErrCorruptUser, v)
	}
	*u = UserState{}
	u.LastAction = d.varint()
	u.SessionStart = d.varint()
	u.Sessions = uint32(d.uvarint())
	u.PathLen = uint32(d.uvarint())
	n := d.count()
	if n > 0 {
		u.Path = make([]string, n)
		for i := range u.Path {
			u.Path[i] = d.str()
		}
	}
	n = d.count()
	if n > 0 {
		u.Touches = make([]Touch, n)
		for i := range u.Touches {
			t := &u.Touches[i]
			t.Channel = d.str()
			t.Campaign = d.str()
			t.Time = d.varint()
			t.View = d.byte() == 1
		}
	}
	n = d.count()
	if n > 0 {
		u.Seen = make([]Seen, n)
		for i := range u.Seen {
			u.Seen[i].Hash = d.uint64()
			u.Seen[i].Time = d.varint()
		}
	}
	if d.err == nil && len(d.b) != 0 {
		d.err = fmt.Errorf("%w: %d trailing bytes", ErrCorruptUser, len(d.b))
	}
	return d.err
}

type decoder struct {
	b   []byte
	err error
}

func (d *decoder) fail() {
	if d.err == nil {
		d.err = ErrCorruptUser
	}
	d.b = nil
}

func (d *decoder) byte() byte {
	if len(d.b) < 1 {
		d.fail()
		return 0
	}
	c := d.b[0]
	d.b = d.b[1:]
	return c
}

func (d *decoder) uint64() uint64 {
	if len(d.b) < 8 {
		d.fail()
		return 0
	}
	v := binary.BigEndian.Uint64(d.b)
	d.b = d.b[8:]
	return v
}

func (d *decoder) varint() int64 {
	v, n := binary.Varint(d.b)
	if n <= 0 {
		d.fail()
		return 0
	}
	d.b = d.b[n:]
	return v
}

func (d *decoder) uvarint() uint64 {
	v, n := binary.Uvarint(d.b)
	if n <= 0 {
		d.fail()
		return 0
	}
	d.b = d.b[n:]
	return v
}

// count reads an element count and bounds it by the remaining bytes, so a
// corrupt count cannot make us allocate huge slices.
func (d *decoder) count() int {
	n := d.uvarint()
	if n > uint64(len(d.b)) {
		d.fail()
		return 0
	}
	return int(n)
}

func (d *decoder) str() string {
	n := d.uvarint()
	if n > uint64(len(d.b)) {
		d.fail()
		return ""
	}
	s := string(d.b[:n])
	d.b = d.b[n:]
	return s
}
