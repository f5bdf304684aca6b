package tally

import "testing"

// FuzzDecodeTable: decoding a stored counter table never panics, and a
// decoded table survives a round trip.
func FuzzDecodeTable(f *testing.F) {
	f.Add(AppendTable(nil, Table{"linear\x1fmail\x1f": {1, 2, 3}, "x": {-1, 0, 5}}))
	f.Add([]byte{1, 0})
	f.Add([]byte{1, 255, 255, 255, 255, 15})
	f.Fuzz(func(t *testing.T, b []byte) {
		got := Table{}
		if err := DecodeTable(b, got); err != nil {
			return
		}
		back := Table{}
		if err := DecodeTable(AppendTable(nil, got), back); err != nil {
			t.Fatalf("round trip: %v", err)
		}
		for k, v := range got {
			if !v.IsZero() && back[k] != v {
				t.Fatalf("%q = %v after round trip, want %v", k, back[k], v)
			}
		}
	})
}
