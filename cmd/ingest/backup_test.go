package main

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/touchledger/touchledger/demo/shop"
)

// TestBackupRestoreCommands: a backup of a replayed directory, restored into
// a new one, answers exactly like the original; a corrupt backup is refused
// and leaves nothing behind.
func TestBackupRestoreCommands(t *testing.T) {
	c := shop.DefaultConfig()
	c.Visitors, c.Days, c.ShiftDay, c.IncidentDay = 2000, 5, 2, 3
	var buf bytes.Buffer
	if _, err := shop.Generate(&buf, c); err != nil {
		t.Fatal(err)
	}
	work := t.TempDir()
	input := filepath.Join(work, "e.jsonl")
	os.WriteFile(input, buf.Bytes(), 0o644)
	src := filepath.Join(work, "src")
	var out, errb bytes.Buffer
	if code := run([]string{"--data", src, "--replay", input}, &out, &errb); code != 0 {
		t.Fatalf("replay: %s", errb.String())
	}
	file := filepath.Join(work, "b.backup")
	if code := run([]string{"backup", "--data", src, "--out", file}, &out, &errb); code != 0 {
		t.Fatalf("backup: %s", errb.String())
	}
	dst := filepath.Join(work, "dst")
	if code := run([]string{"restore", "--in", file, "--data", dst}, &out, &errb); code != 0 {
		t.Fatalf("restore: %s", errb.String())
	}
	if a, b := creditJSON(t, src), creditJSON(t, dst); a != b {
		t.Error("restored directory answers differently")
	}
	b, _ := os.ReadFile(file)
	os.WriteFile(file, b[:len(b)-5], 0o644)
	errb.Reset()
	bad := filepath.Join(work, "bad")
	if code := run([]string{"restore", "--in", file, "--data", bad}, &out, &errb); code == 0 || !strings.Contains(errb.String(), "backup") {
		t.Errorf("truncated backup restored: %q", errb.String())
	}
	if _, err := os.Stat(bad); !os.IsNotExist(err) {
		t.Error("a failed restore left a directory behind")
	}
}
