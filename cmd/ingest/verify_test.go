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

// TestDeletedRejectsFileSaysHow (issue 9 item 10): a deleted rejects file
// stops the next replay with a message saying how to go on, and
// --rejects-lost goes on (the old message only said the file "was changed
// outside touchledger").
func TestDeletedRejectsFileSaysHow(t *testing.T) {
	tmp := t.TempDir()
	dir := filepath.Join(tmp, "data")
	write := func(name, body string) string {
		p := filepath.Join(tmp, name)
		os.WriteFile(p, []byte(body), 0o644)
		return p
	}
	a := write("a.jsonl", `{"id":"a1","user":"u","time":"2026-10-01T10:00:00Z","kind":"action","action":"x"}`+"\nnot json\n")
	b := write("b.jsonl", `{"id":"b1","user":"u","time":"2026-10-01T11:00:00Z","kind":"action","action":"x"}`+"\nnot json either\n")
	var out, errb bytes.Buffer
	if code := run([]string{"--data", dir, "--replay", a}, &out, &errb); code != 0 {
		t.Fatalf("replay a: %s", errb.String())
	}
	os.Remove(filepath.Join(dir, "rejects.jsonl"))
	errb.Reset()
	if code := run([]string{"--data", dir, "--replay", b}, &out, &errb); code != 1 || !strings.Contains(errb.String(), "--rejects-lost") {
		t.Errorf("replay b after the rejects file was deleted: exit %d, %q", code, errb.String())
	}
	out.Reset()
	if code := run([]string{"--data", dir, "--replay", b, "--rejects-lost"}, &out, &errb); code != 0 || !strings.Contains(out.String(), "accepted 1") {
		t.Errorf("replay b with --rejects-lost: exit %d, %q %q", code, out.String(), errb.String())
	}
	got, _ := os.ReadFile(filepath.Join(dir, "rejects.jsonl"))
	if !strings.Contains(string(got), "not json either") || strings.Count(string(got), "\n") != 1 {
		t.Errorf("rejects file %q: want the one new record", got)
	}
}
