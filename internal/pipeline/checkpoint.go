package pipeline

import (
	"encoding/binary"
	"errors"
	"fmt"
	"sort"

	"github.com/touchledger/touchledger/internal/event"
)

// Counts are the per-source input counters, committed with the state they
// describe so that they survive restarts exactly.
type Counts struct {
	Accepted  uint64                  // applied to the state
	Duplicate uint64                  // already accepted (same user and id within the horizon)
	Late      uint64                  // older than the watermark
	Erased    uint64                  // dropped because their user was erased moments before
	Rejected  map[event.Reason]uint64 // invalid input, by reason (late excluded)
}

// RejectedTotal returns the number of invalid inputs (late excluded).
func (c Counts) RejectedTotal() uint64 {
	var n uint64
	for _, v := range c.Rejected {
		n += v
	}
	return n
}

func (c Counts) clone() Counts {
	out := c
	out.Rejected = make(map[event.Reason]uint64, len(c.Rejected))
	for k, v := range c.Rejected {
		out.Rejected[k] = v
	}
	return out
}

// Checkpoint is a source's committed reading position.
//
// Invariant: every input position < Next has been read; its effect is in the
// committed state unless the position is listed in Pending, in which case the
// event was waiting in the reorder buffer and must be read again on resume.
type Checkpoint struct {
	Next    uint64
	Pending []uint64 // sorted ascending
	Done    bool     // the source was read to its end and the buffer drained
	Counts  Counts
}

// checkpointVersion 2 added Erased after the pending positions; version 1
// checkpoints still decode (Erased 0).
const checkpointVersion = 2

// ErrCorruptCheckpoint is returned for an undecodable checkpoint.
var ErrCorruptCheckpoint = errors.New("pipeline: corrupt checkpoint")

// MarshalBinary encodes c:
//
//	version | uvarint Next | byte Done | uvarint Accepted | uvarint Duplicate | uvarint Late |
//	uvarint r | r × (uvarint len | reason | uvarint count) | uvarint p | p × uvarint delta-from-previous
func (c Checkpoint) MarshalBinary() ([]byte, error) {
	b := []byte{checkpointVersion}
	b = binary.AppendUvarint(b, c.Next)
	if c.Done {
		b = append(b, 1)
	} else {
		b = append(b, 0)
	}
	b = binary.AppendUvarint(b, c.Counts.Accepted)
	b = binary.AppendUvarint(b, c.Counts.Duplicate)
	b = binary.AppendUvarint(b, c.Counts.Late)
	reasons := make([]string, 0, len(c.Counts.Rejected))
	for r := range c.Counts.Rejected {
		reasons = append(reasons, string(r))
	}
	sort.Strings(reasons)
	b = binary.AppendUvarint(b, uint64(len(reasons)))
	for _, r := range reasons {
		b = binary.AppendUvarint(b, uint64(len(r)))
		b = append(b, r...)
		b = binary.AppendUvarint(b, c.Counts.Rejected[event.Reason(r)])
	}
	b = binary.AppendUvarint(b, uint64(len(c.Pending)))
	var prev uint64
	for _, p := range c.Pending {
		b = binary.AppendUvarint(b, p-prev)
		prev = p
	}
	b = binary.AppendUvarint(b, c.Counts.Erased)
	return b, nil
}

// UnmarshalBinary decodes a checkpoint.
func (c *Checkpoint) UnmarshalBinary(b []byte) error {
	fail := func(what string) error { return fmt.Errorf("%w: %s", ErrCorruptCheckpoint, what) }
	if len(b) < 1 || (b[0] != 1 && b[0] != checkpointVersion) {
		return fail("version")
	}
	version := b[0]
	b = b[1:]
	u := func() (uint64, bool) {
		v, n := binary.Uvarint(b)
		if n <= 0 {
			return 0, false
		}
		b = b[n:]
		return v, true
	}
	var ok bool
	*c = Checkpoint{Counts: Counts{Rejected: map[event.Reason]uint64{}}}
	if c.Next, ok = u(); !ok || len(b) < 1 {
		return fail("next")
	}
	c.Done = b[0] == 1
	b = b[1:]
	if c.Counts.Accepted, ok = u(); !ok {
		return fail("accepted")
	}
	if c.Counts.Duplicate, ok = u(); !ok {
		return fail("duplicate")
	}
	if c.Counts.Late, ok = u(); !ok {
		return fail("late")
	}
	n, ok := u()
	if !ok || n > uint64(len(b)) {
		return fail("reasons")
	}
	for i := uint64(0); i < n; i++ {
		l, ok := u()
		if !ok || l > uint64(len(b)) {
			return fail("reason")
		}
		r := event.Reason(b[:l])
		b = b[l:]
		v, ok := u()
		if !ok {
			return fail("reason count")
		}
		c.Counts.Rejected[r] = v
	}
	n, ok = u()
	if !ok || n > uint64(len(b)) {
		return fail("pending")
	}
	var prev uint64
	for i := uint64(0); i < n; i++ {
		d, ok := u()
		if !ok {
			return fail("pending position")
		}
		prev += d
		c.Pending = append(c.Pending, prev)
	}
	if version >= 2 {
		if c.Counts.Erased, ok = u(); !ok {
			return fail("erased")
		}
	}
	if len(b) != 0 {
		return fail("trailing bytes")
	}
	return nil
}
