package pipeline

import (
	"bytes"
	"context"
	"encoding/json"
	"path/filepath"
	"strings"
	"sync"
	"testing"

	"github.com/touchledger/touchledger/internal/state"
)

// TestBackupsWhileReplaying (issue 6): backups taken while commits go on are
// point-in-time: each one, restored, equals a fresh replay of exactly the
// input positions its checkpoint says were read (with the same events still
// buffered), answer for answer.
func TestBackupsWhileReplaying(t *testing.T) {
	input := demoInput(t, 3000, 6)
	lines := strings.Split(strings.TrimSpace(string(input)), "\n")
	cfg := testConfig()
	cfg.CommitEvents = 500
	ctx := context.Background()
	dir := t.TempDir()
	st, err := state.Open(ctx, state.DefaultOptions(dir))
	if err != nil {
		t.Fatal(err)
	}
	p, err := New(st, cfg, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	var (
		backups [][]byte
		mu      sync.Mutex
		wg      sync.WaitGroup
	)
	every := len(lines) / 55 // about 50 backups (issue 6), fewer with -short
	if testing.Short() {
		every = len(lines) / 12
	}
	if _, err := p.Begin("in"); err != nil {
		t.Fatal(err)
	}
	for i, l := range lines {
		if err := p.Offer(ctx, uint64(i+1), []byte(l)); err != nil {
			t.Fatal(err)
		}
		if i%every == every/2 {
			// Taken concurrently with the processing and commits that follow.
			wg.Add(1)
			go func() {
				defer wg.Done()
				var buf bytes.Buffer
				if _, err := st.Backup(&buf); err != nil {
					t.Error(err)
					return
				}
				mu.Lock()
				backups = append(backups, buf.Bytes())
				mu.Unlock()
			}()
		}
	}
	if err := p.Finish(ctx, true); err != nil {
		t.Fatal(err)
	}
	wg.Wait()
	p.Close()
	st.Close()
	if want := len(lines)/every - 1; len(backups) < want {
		t.Fatalf("only %d backups taken during the replay, want %d", len(backups), want)
	}
	seen := map[uint64][]byte{} // committed position → answers of a fresh replay of that prefix
	compared := 0
	for i, b := range backups {
		rdir := filepath.Join(t.TempDir(), "restored")
		if _, err := state.Restore(bytes.NewReader(b), rdir, state.DefaultOptions(rdir)); err != nil {
			t.Fatalf("backup %d: %v", i, err)
		}
		rs, err := state.Open(ctx, state.DefaultOptions(rdir))
		if err != nil {
			t.Fatal(err)
		}
		r := rs.NewReader()
		raw, _ := r.Checkpoint("in")
		r.Discard()
		rs.Close()
		if raw == nil {
			continue // taken before the first commit
		}
		var cp Checkpoint
		if err := cp.UnmarshalBinary(raw); err != nil {
			t.Fatal(err)
		}
		if cp.Done {
			continue // the final state: covered by the replay tests
		}
		want, ok := seen[cp.Next]
		if !ok {
			want = freshPrefix(t, cfg, lines, cp.Next)
			seen[cp.Next] = want
		}
		got, _ := json.Marshal(answers(t, rdir))
		if !bytes.Equal(got, want) {
			t.Errorf("backup %d (next %d): restored answers differ from a replay of its prefix", i, cp.Next)
		}
		compared++
	}
	t.Logf("%d backups taken, %d restored and compared, %d distinct committed positions", len(backups), compared, len(seen))
	if len(seen) < 2 {
		t.Errorf("backups covered only %d distinct positions", len(seen))
	}
	if _, err := state.Restore(bytes.NewReader(backups[0][:len(backups[0])-3]), filepath.Join(t.TempDir(), "x"), state.DefaultOptions("x")); err == nil {
		t.Error("a truncated backup restored without error")
	}
}

// freshPrefix replays lines[:next-1] into a new store, commits with the
// reorder buffer as it stands (as the backed-up worker had), and returns the
// answers as JSON.
func freshPrefix(t *testing.T, cfg Config, lines []string, next uint64) []byte {
	t.Helper()
	ctx := context.Background()
	{
		fdir := t.TempDir()
		fs, _ := state.Open(ctx, state.DefaultOptions(fdir))
		fp, _ := New(fs, cfg, nil, nil)
		fp.Begin("in")
		for pos := uint64(1); pos < next; pos++ {
			if err := fp.Offer(ctx, pos, []byte(lines[pos-1])); err != nil {
				t.Fatal(err)
			}
		}
		if err := fp.commit(ctx, true); err != nil {
			t.Fatal(err)
		}
		fp.Close()
		fs.Close()
		want, _ := json.Marshal(answers(t, fdir))
		return want
	}
}
