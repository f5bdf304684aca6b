package main

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/touchledger/touchledger/demo/shop"
)

// TestVerifyAndRefuseCorruption: `ingest verify` passes an intact
// directory; after 64 bytes of a table file are flipped, verify and a
// replay both exit 1 naming the corruption, and the table is still there
// (issue 9 item 3: on the old code the replay read a third fewer entries
// and answered from them).
func TestVerifyAndRefuseCorruption(t *testing.T) {
	tmp := t.TempDir()
	dir := filepath.Join(tmp, "data")
	c := shop.DefaultConfig()
	c.Visitors, c.Days, c.ShiftDay, c.IncidentDay = 800, 3, 1, 2
	var buf bytes.Buffer
	if _, err := shop.Generate(&buf, c); err != nil {
		t.Fatal(err)
	}
	in := filepath.Join(tmp, "in.jsonl")
	if err := os.WriteFile(in, buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	var out, errb bytes.Buffer
	if code := run([]string{"--data", dir, "--replay", in}, &out, &errb); code != 0 {
		t.Fatalf("replay: %d %s", code, errb.String())
	}
	out.Reset()
	if code := run([]string{"verify", "--data", dir}, &out, &errb); code != 0 || !strings.Contains(out.String(), "all intact") {
		t.Fatalf("verify intact: exit %d, %q %q", code, out.String(), errb.String())
	}
	ssts, _ := filepath.Glob(filepath.Join(dir, "*.sst"))
	if len(ssts) == 0 {
		t.Fatal("no table file")
	}
	b, err := os.ReadFile(ssts[0])
	if err != nil {
		t.Fatal(err)
	}
	for i := range 64 {
		b[len(b)/2+i] ^= 0xff
	}
	if err := os.WriteFile(ssts[0], b, 0o644); err != nil {
		t.Fatal(err)
	}
	errb.Reset()
	if code := run([]string{"verify", "--data", dir}, &out, &errb); code != 1 || !strings.Contains(errb.String(), "corrupt") {
		t.Errorf("verify damaged: exit %d, %q", code, errb.String())
	}
	errb.Reset()
	if code := run([]string{"--data", dir, "--replay", in}, &out, &errb); code != 1 || !strings.Contains(errb.String(), "restore it from a backup") {
		t.Errorf("replay on a damaged directory: exit %d, %q", code, errb.String())
	}
	if _, err := os.Stat(ssts[0]); err != nil {
		t.Errorf("damaged table removed: %v", err)
	}
}
