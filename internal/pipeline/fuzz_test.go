package pipeline

import (
	"reflect"
	"testing"

	"github.com/touchledger/touchledger/internal/event"
)

// FuzzCheckpoint: decoding a stored checkpoint never panics, and a decoded
// checkpoint survives a round trip.
func FuzzCheckpoint(f *testing.F) {
	cp := Checkpoint{Next: 42, Pending: []uint64{3, 7, 40}, Done: true,
		Counts: Counts{Accepted: 30, Duplicate: 2, Late: 1, Rejected: map[event.Reason]uint64{event.ReasonBadTime: 3}}}
	b, _ := cp.MarshalBinary()
	f.Add(b)
	f.Add([]byte{1, 0, 0, 0, 0, 0, 0, 0})
	f.Fuzz(func(t *testing.T, b []byte) {
		var got Checkpoint
		if err := got.UnmarshalBinary(b); err != nil {
			return
		}
		enc, _ := got.MarshalBinary()
		var back Checkpoint
		if err := back.UnmarshalBinary(enc); err != nil {
			t.Fatalf("round trip: %v", err)
		}
		if !reflect.DeepEqual(got, back) {
			t.Fatalf("round trip changed %+v to %+v", got, back)
		}
	})
}
