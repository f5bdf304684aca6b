package state

import (
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// corruptible builds a store whose data lies in table files (Close flushes
// the memtable) and returns its directory and the table file names.
func corruptible(t *testing.T) (string, []string) {
	t.Helper()
	dir := t.TempDir()
	ctx := context.Background()
	s, err := Open(ctx, DefaultOptions(dir))
	if err != nil {
		t.Fatal(err)
	}
	for round := range 4 {
		users := map[string][]byte{}
		for i := range 3000 {
			users[fmt.Sprintf("user-%d-%d", round, i)] = []byte(strings.Repeat(fmt.Sprintf("state %d;", i), 8))
		}
		if _, err := s.Commit(ctx, &Commit{Users: users, Meta: Meta{Watermark: &Watermark{MaxSeen: int64(round)}}}); err != nil {
			t.Fatal(err)
		}
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	ssts, _ := filepath.Glob(filepath.Join(dir, "*.sst"))
	if len(ssts) == 0 {
		t.Fatal("no table files written")
	}
	return dir, ssts
}

// TestCorruptionRefused damages a store's files the ways the issue found
// (issue 9 item 3) and more: each must make Open (or Verify) fail with
// ErrCorrupt, never panic, never open an emptier store. On the old code
// flipped bytes opened and answered with a third fewer entries, a cut
// table panicked, and a missing or cut MANIFEST opened an empty store.
func TestCorruptionRefused(t *testing.T) {
	flip := func(path string, off func(size int64) int64, n int) {
		b, err := os.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		at := off(int64(len(b)))
		for i := int64(0); i < int64(n) && at+i < int64(len(b)); i++ {
			b[at+i] ^= 0x5a
		}
		if err := os.WriteFile(path, b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	truncate := func(path string, frac float64) {
		st, err := os.Stat(path)
		if err != nil {
			t.Fatal(err)
		}
		if err := os.Truncate(path, int64(float64(st.Size())*frac)); err != nil {
			t.Fatal(err)
		}
	}
	cases := []struct {
		name   string
		damage func(dir string, ssts []string)
	}{
		{"64 bytes flipped mid-table", func(_ string, s []string) { flip(s[0], func(n int64) int64 { return n / 2 }, 64) }},
		{"64 bytes flipped at the table start", func(_ string, s []string) { flip(s[0], func(int64) int64 { return 0 }, 64) }},
		{"bytes flipped in the table index", func(_ string, s []string) { flip(s[0], func(n int64) int64 { return n - 200 }, 16) }},
		{"one byte flipped", func(_ string, s []string) { flip(s[len(s)-1], func(n int64) int64 { return n / 3 }, 1) }},
		{"table cut in half", func(_ string, s []string) { truncate(s[0], 0.5) }},
		{"table cut to 10 bytes", func(_ string, s []string) {
			if err := os.Truncate(s[0], 10); err != nil {
				t.Fatal(err)
			}
		}},
		{"table emptied", func(_ string, s []string) { truncate(s[0], 0) }},
		{"table deleted", func(_ string, s []string) { os.Remove(s[0]) }},
		{"MANIFEST deleted", func(d string, _ []string) { os.Remove(filepath.Join(d, "MANIFEST")) }},
		{"MANIFEST cut to its header", func(d string, _ []string) {
			if err := os.Truncate(filepath.Join(d, "MANIFEST"), 8); err != nil {
				t.Fatal(err)
			}
		}},
		{"MANIFEST emptied", func(d string, _ []string) { truncate(filepath.Join(d, "MANIFEST"), 0) }},
		{"MANIFEST bytes flipped", func(d string, _ []string) {
			flip(filepath.Join(d, "MANIFEST"), func(n int64) int64 { return n / 2 }, 4)
		}},
	}
	refused := 0
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			dir, ssts := corruptible(t)
			c.damage(dir, ssts)
			var err error
			func() {
				defer func() {
					if r := recover(); r != nil {
						err = fmt.Errorf("panic: %v", r)
					}
				}()
				var s *Store
				s, err = Open(context.Background(), DefaultOptions(dir))
				if err == nil {
					_, err = s.Verify(context.Background())
					s.Close()
				}
			}()
			if !errors.Is(err, ErrCorrupt) {
				t.Fatalf("damaged store: %v, want ErrCorrupt", err)
			}
			refused++
		})
	}
	t.Logf("corruption cases refused: %d of %d", refused, len(cases))
}

// TestVerifyIntactStore: Verify reads every key of an intact store back.
func TestVerifyIntactStore(t *testing.T) {
	dir, _ := corruptible(t)
	s, err := Open(context.Background(), DefaultOptions(dir))
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	rep, err := s.Verify(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if rep.Keys < 12000 || rep.Tables == 0 {
		t.Errorf("verify read %d keys in %d tables, want the 12000 users and more", rep.Keys, rep.Tables)
	}
}

// TestEraseUserKeepsPrefixSharers: dropping user "ann" physically must not
// take "anna" (a prefix drop would), also when the process dies between
// the drop and the write-back (the journal is restored by Open).
func TestEraseUserKeepsPrefixSharers(t *testing.T) {
	ctx := context.Background()
	for _, crash := range []bool{false, true} {
		dir := t.TempDir()
		s, err := Open(ctx, DefaultOptions(dir))
		if err != nil {
			t.Fatal(err)
		}
		if _, err := s.Commit(ctx, &Commit{Users: map[string][]byte{"ann": []byte("A"), "anna": []byte("B"), "bob": []byte("C")}}); err != nil {
			t.Fatal(err)
		}
		if crash {
			// As EraseUser does up to the drop, then "dies".
			wb := s.db.NewWriteBatch()
			wb.Set(append([]byte{prefixJournal}, userKey("anna")...), []byte("B"))
			wb.Set(append(userKey("ann"), dropSentinel...), nil)
			wb.Set(append([]byte{prefixErasing, byte(len(userKey("ann")))}, userKey("ann")...), nil)
			if err := wb.Flush(); err != nil {
				t.Fatal(err)
			}
		} else if err := s.EraseUser("ann"); err != nil {
			t.Fatal(err)
		}
		s.Close()
		if s, err = Open(ctx, DefaultOptions(dir)); err != nil {
			t.Fatal(err)
		}
		r := s.NewReader()
		for id, want := range map[string]string{"ann": "", "anna": "B", "bob": "C"} {
			if got, err := r.User(id); err != nil || string(got) != want {
				t.Errorf("crash=%v: user %s = %q (%v), want %q", crash, id, got, err, want)
			}
		}
		n := 0
		r.Users(func(string) error { n++; return nil })
		if n != 2 {
			t.Errorf("crash=%v: %d users, want 2", crash, n)
		}
		r.Discard()
		s.Close()
	}
}
