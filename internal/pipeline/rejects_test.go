package pipeline

import (
	"os"
	"path/filepath"
	"testing"

	"github.com/touchledger/touchledger/internal/event"
)

// TestRejectFileRotation (issue 6, retention): a committed rejects file over
// the limit is rotated when the next run starts; a crash between the rename
// and the next commit is recognised; only keep rotated files stay.
func TestRejectFileRotation(t *testing.T) {
	path := filepath.Join(t.TempDir(), "rejects.jsonl")
	write := func(mark int64, n int) int64 {
		rf, err := OpenRejectFile(path)
		if err != nil {
			t.Fatal(err)
		}
		defer rf.Close()
		rf.Rotate(100, 2)
		if err := rf.Reset(mark); err != nil {
			t.Fatal(err)
		}
		for i := 0; i < n; i++ {
			rf.Reject(Origin{Pos: uint64(i + 1)}, event.ReasonBadJSON, "bad", []byte("not json"))
		}
		m, err := rf.Sync()
		if err != nil {
			t.Fatal(err)
		}
		return m
	}
	m1 := write(0, 3) // committed: m1 > 100 bytes
	if m1 <= 100 {
		t.Fatalf("first run wrote %d bytes; the test needs more than the limit", m1)
	}
	write(m1, 1) // start: rotates (path.1 = m1 bytes), writes 1 record
	if fi, err := os.Stat(path + ".1"); err != nil || fi.Size() != m1 {
		t.Fatalf("rotated file: %v, size want %d", err, m1)
	}
	// A crash after the rename and before the commit: the store still says
	// m1, the file is new. Simulate by truncating the new file to empty.
	os.Truncate(path, 0)
	if m := write(m1, 0); m != 0 {
		t.Errorf("after a rotation without a commit, mark = %d, want 0", m)
	}

	// Rotating twice more keeps only two old files.
	big := write(0, 3)
	big = write(big, 3)
	write(big, 0)
	if _, err := os.Stat(path + ".3"); !os.IsNotExist(err) {
		t.Errorf("a third rotated file was kept: %v", err)
	}
	if _, err := os.Stat(path + ".2"); err != nil {
		t.Errorf("second rotated file missing: %v", err)
	}
}
