package pathstats

import (
	"bytes"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
)

// FuzzTopKUnmarshalBinary checks that UnmarshalBinary never panics, that
// whatever it accepts satisfies the summary invariants, re-encodes to a
// canonical form that decodes to the same summary, and can keep observing.
// Seeds: f.Add below plus testdata/fuzz/FuzzTopKUnmarshalBinary.
func FuzzTopKUnmarshalBinary(f *testing.F) {
	for _, s := range []*TopK{
		NewTopK(1),
		topKOf(3, "abacabdabe"),
		topKOf(3, "aaabbcaadbbeafaab"),
		topKOf(5, "abcab"),
	} {
		b, err := s.MarshalBinary()
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
	f.Add([]byte{1, 2, 12, 2, 1, 'a', 8, 5, 1, 'b', 4, 0})
	f.Add([]byte{})
	f.Fuzz(func(t *testing.T, b []byte) {
		var s TopK
		if err := s.UnmarshalBinary(b); err != nil {
			return
		}
		items := s.Items()
		if len(items) > s.Cap() || s.Cap() < 1 {
			t.Fatalf("accepted %d items with capacity %d", len(items), s.Cap())
		}
		var sum int64
		u := s.UnlistedMax()
		for _, it := range items {
			sum += it.Count
			if it.Count < 1 || it.Error < 0 || it.Error > it.Count || it.Error > u && len(items) == s.Cap() {
				t.Fatalf("accepted counter %+v (UnlistedMax %d)", it, u)
			}
		}
		if sum > s.Total() {
			t.Fatalf("accepted Σcounts %d above total %d", sum, s.Total())
		}
		canon, err := s.MarshalBinary()
		if err != nil {
			t.Fatal(err)
		}
		var again TopK
		if err := again.UnmarshalBinary(canon); err != nil {
			t.Fatalf("re-encoding rejected: %v", err)
		}
		if !slices.Equal(again.Items(), items) || again.Total() != s.Total() || again.Cap() != s.Cap() {
			t.Fatalf("re-encoding decoded to a different summary")
		}
		if canon2, _ := again.MarshalBinary(); !bytes.Equal(canon, canon2) {
			t.Fatalf("encoding not canonical")
		}
		if s.Total() < 1<<62 {
			for _, k := range []string{"a", "zz", "a", ""} {
				s.Observe(k, 1)
			}
			if s.Len() > s.Cap() {
				t.Fatalf("Len %d above Cap %d after Observe", s.Len(), s.Cap())
			}
		}
	})
}

// TestTopKFuzzSeedsDecode keeps the committed seed corpus meaningful: every
// seed decodes except those named corrupt-*.
func TestTopKFuzzSeedsDecode(t *testing.T) {
	dir := filepath.Join("testdata", "fuzz", "FuzzTopKUnmarshalBinary")
	entries, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	if len(entries) == 0 {
		t.Fatal("no committed seeds")
	}
	for _, e := range entries {
		raw, err := os.ReadFile(filepath.Join(dir, e.Name()))
		if err != nil {
			t.Fatal(err)
		}
		lines := strings.Split(strings.TrimSpace(string(raw)), "\n")
		if len(lines) != 2 || lines[0] != "go test fuzz v1" ||
			!strings.HasPrefix(lines[1], "[]byte(") || !strings.HasSuffix(lines[1], ")") {
			t.Fatalf("%s: not a one-value corpus file", e.Name())
		}
		b, err := strconv.Unquote(strings.TrimSuffix(strings.TrimPrefix(lines[1], "[]byte("), ")"))
		if err != nil {
			t.Fatalf("%s: %v", e.Name(), err)
		}
		var s TopK
		err = s.UnmarshalBinary([]byte(b))
		if wantErr := strings.HasPrefix(e.Name(), "corrupt-"); (err != nil) != wantErr {
			t.Errorf("%s: UnmarshalBinary error = %v, want error %v", e.Name(), err, wantErr)
		}
	}
}
