package state

import (
	"context"
	"testing"
)

// TestCommitMeta: typed metadata is written under its keys and read back;
// a field left nil keeps the stored value (the pipeline relies on both:
// every commit records the watermark, only some record a rejects length).
func TestCommitMeta(t *testing.T) {
	ctx := context.Background()
	s, err := Open(ctx, DefaultOptions(t.TempDir()))
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	open, mark := "replay:/data/events.jsonl", int64(4096)
	if _, err := s.Commit(ctx, &Commit{Meta: Meta{
		Watermark:  &Watermark{MaxSeen: 1_700_000_000_000_000_000, Floor: 1_699_999_700_000_000_000},
		Open:       &open,
		RejectsLen: &mark,
		Keys:       map[string][]byte{"key/v1": []byte("fp1")},
	}}); err != nil {
		t.Fatal(err)
	}
	none := ""
	if _, err := s.Commit(ctx, &Commit{Meta: Meta{Open: &none}}); err != nil {
		t.Fatal(err)
	}
	r := s.NewReader()
	defer r.Discard()
	maxSeen, floor, ok, err := r.Watermark()
	if err != nil || !ok || maxSeen != 1_700_000_000_000_000_000 || floor != 1_699_999_700_000_000_000 {
		t.Errorf("watermark %d %d %v %v, want the first commit's", maxSeen, floor, ok, err)
	}
	if got, err := r.Open(); err != nil || got != "" {
		t.Errorf("open %q %v, want the second commit's \"\"", got, err)
	}
	if got, err := r.RejectsLen(); err != nil || got != mark {
		t.Errorf("rejects length %d %v, want %d (kept: the second commit left it unset)", got, err, mark)
	}
	if keys, err := r.MetaPrefix("key/"); err != nil || string(keys["key/v1"]) != "fp1" {
		t.Errorf("key records %q %v", keys, err)
	}
}
