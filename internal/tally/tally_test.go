package tally

import (
	"math/rand"
	"testing"
)

func TestTableCodecRoundTrip(t *testing.T) {
	rng := rand.New(rand.NewSource(1))
	tb := Table{}
	for i := 0; i < 200; i++ {
		tb[Join("m", string(rune('a'+rng.Intn(26))), string(rune('a'+rng.Intn(26))))] = Vec{rng.Int63() - rng.Int63(), rng.Int63n(1e12), -5}
	}
	enc := AppendTable(nil, tb)
	got := Table{}
	if err := DecodeTable(enc, got); err != nil {
		t.Fatal(err)
	}
	if len(got) != len(tb) {
		t.Fatalf("decoded %d entries, want %d", len(got), len(tb))
	}
	for k, v := range tb {
		if got[k] != v {
			t.Errorf("%q = %v, want %v", k, got[k], v)
		}
	}
	for i := 0; i < len(enc); i++ {
		if err := DecodeTable(enc[:i], Table{}); err == nil && i > 0 {
			t.Errorf("truncated at %d decoded without error", i)
		}
	}
}

func TestFloorDiv(t *testing.T) {
	for _, c := range []struct{ a, b, want int64 }{{7, 5, 1}, {-7, 5, -2}, {-5, 5, -1}, {0, 5, 0}, {5, 5, 1}} {
		if got := FloorDiv(c.a, c.b); got != c.want {
			t.Errorf("FloorDiv(%d, %d) = %d, want %d", c.a, c.b, got, c.want)
		}
	}
}
