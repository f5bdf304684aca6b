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
	if testing.Short() {
		t.Skip("long")
	}
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
	if _, err := p.Begin("in"); err != nil {
		t.Fatal(err)
	}
	for i, l := range lines {
		if err := p.Offer(ctx, uint64(i+1), []byte(l)); err != nil {
			t.Fatal(err)
		}
		if i%600 == 300 {
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
	if len(backups) < 3 {
		t.Fatalf("only %d backups taken during the replay", len(backups))
	}
	seen := map[uint64]bool{}
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
		if seen[cp.Next] {
			continue
		}
		seen[cp.Next] = true
		// A fresh run over the same prefix, stopped the same way.
		fdir := t.TempDir()
		fs, _ := state.Open(ctx, state.DefaultOptions(fdir))
		fp, _ := New(fs, cfg, nil, nil)
		fp.Begin("in")
		for pos := uint64(1); pos < cp.Next; pos++ {
			if err := fp.Offer(ctx, pos, []byte(lines[pos-1])); err != nil {
				t.Fatal(err)
			}
		}
		if err := fp.commit(ctx, true); err != nil {
			t.Fatal(err)
		}
		fp.Close()
		fs.Close()
		if cp.Done {
			continue // the final state: covered by the replay tests
		}
		got, _ := json.Marshal(answers(t, rdir))
		want, _ := json.Marshal(answers(t, fdir))
		if !bytes.Equal(got, want) {
			t.Errorf("backup %d (next %d): restored answers differ from a replay of its prefix", i, cp.Next)
		}
	}
	t.Logf("%d backups, %d distinct committed positions compared", len(backups), len(seen))
	if len(seen) < 2 {
		t.Errorf("backups covered only %d distinct positions", len(seen))
	}
	if _, err := state.Restore(bytes.NewReader(backups[0][:len(backups[0])-3]), filepath.Join(t.TempDir(), "x"), state.DefaultOptions("x")); err == nil {
		t.Error("a truncated backup restored without error")
	}
}
