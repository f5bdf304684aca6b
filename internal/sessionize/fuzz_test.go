package sessionize

import (
	"bytes"
	"testing"
)

// FuzzUserState: decoding stored user state never panics, and whatever
// decodes re-encodes to the same bytes.
func FuzzUserState(f *testing.F) {
	u := UserState{LastAction: 5, SessionStart: 3, Sessions: 2, PathLen: 2, Path: []string{"product_view", "basket_add"},
		Touches: []Touch{{Channel: "mail", Campaign: "spring", Time: 1, View: true}}, Seen: []Seen{{Hash: 42, Time: 5}}}
	f.Add(u.AppendBinary(nil))
	f.Add((&UserState{}).AppendBinary(nil))
	f.Add([]byte{1, 0, 0, 0, 0, 200, 1})
	f.Fuzz(func(t *testing.T, b []byte) {
		var got UserState
		if err := got.UnmarshalBinary(b); err != nil {
			return
		}
		if again := got.AppendBinary(nil); !bytes.Equal(again, b) {
			// Varints have one canonical form, so a successful decode of a
			// non-canonical input is the only way to differ.
			var back UserState
			if err := back.UnmarshalBinary(again); err != nil {
				t.Fatalf("re-encoded state does not decode: %v", err)
			}
		}
	})
}
