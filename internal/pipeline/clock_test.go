package pipeline

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"path/filepath"
	"reflect"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"github.com/touchledger/touchledger/internal/event"
	"github.com/touchledger/touchledger/internal/state"
)

// insertLine puts line into input after the n-th line.
func insertLine(input []byte, n int, line string) []byte {
	ls := strings.SplitAfter(string(input), "\n")
	out := strings.Join(ls[:n], "") + line + "\n" + strings.Join(ls[n:], "")
	return []byte(out)
}

// TestClockCannotBePoisoned: one valid event far in the future must not
// move event time (issue 9 item 2). On the old code the event dated
// 2200-01-01 moved the watermark, nearly every later event was rejected as
// late and "the last 400 days" ended in 2199. Each case must answer exactly
// as the input without the poison, with the poison rejected as future.
func TestClockCannotBePoisoned(t *testing.T) {
	base := demoInput(t, 1500, 6)
	cfg := testConfig()
	cfg.MaxJump = day
	clean := t.TempDir()
	cleanCP := replayBytes(t, clean, cfg, "in", base)
	want := answers(t, clean)
	n := bytes.Count(base, []byte("\n"))
	cases := []struct {
		name   string
		poison []string // lines inserted, each after the line of the same index in at
		at     []int
		cfg    func(*Config)
	}{
		{"year 2200 (outside the sane years)", []string{`{"id":"p1","user":"mallory","time":"2200-01-01T00:00:00Z","kind":"action","action":"x"}`}, []int{n / 3}, nil},
		{"year 2090, decided 4096 inputs later", []string{`{"id":"p2","user":"mallory","time":"2090-01-01T00:00:00Z","kind":"touch","channel":"email"}`}, []int{n / 4}, nil},
		{"year 2090, last line, decided at the end", []string{`{"id":"p3","user":"mallory","time":"2090-01-01T00:00:00Z","kind":"action","action":"x"}`}, []int{n}, nil},
		{"seven of them, one short of confirming", func() []string {
			var ls []string
			for i := range JumpConfirm - 1 {
				ls = append(ls, fmt.Sprintf(`{"id":"q%d","user":"m%d","time":"2090-01-01T00:0%d:00Z","kind":"action","action":"x"}`, i, i, i))
			}
			return ls
		}(), []int{n / 2, n / 2, n / 2, n / 2, n / 2, n / 2, n / 2}, nil},
		{"before 1970", []string{`{"id":"p4","user":"mallory","time":"1969-12-31T23:59:59Z","kind":"action","action":"x"}`}, []int{n / 2}, nil},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			input := base
			for i := len(c.poison) - 1; i >= 0; i-- {
				input = insertLine(input, c.at[i], c.poison[i])
			}
			dir := t.TempDir()
			cp := replayBytes(t, dir, cfg, "in", input)
			if cp.Counts.Late != cleanCP.Counts.Late || cp.Counts.Accepted != cleanCP.Counts.Accepted {
				t.Errorf("accepted %d, late %d; without the poison: accepted %d, late %d",
					cp.Counts.Accepted, cp.Counts.Late, cleanCP.Counts.Accepted, cleanCP.Counts.Late)
			}
			reason := event.ReasonFuture
			if strings.Contains(c.poison[0], "1969") {
				reason = event.ReasonBadTime
			}
			if got := cp.Counts.Rejected[reason] - cleanCP.Counts.Rejected[reason]; got != uint64(len(c.poison)) {
				t.Errorf("%s rejects %d, want %d", reason, got, len(c.poison))
			}
			if got := answers(t, dir); !reflect.DeepEqual(got, want) {
				t.Errorf("answers differ from the input without the poison")
			}
			st, err := state.Open(context.Background(), state.DefaultOptions(dir))
			if err != nil {
				t.Fatal(err)
			}
			defer st.Close()
			r := st.NewReader()
			defer r.Discard()
			if ms, _, _, _ := r.Watermark(); time.Unix(0, ms).Year() != 2026 {
				t.Errorf("largest event time seen %s, want the data's", time.Unix(0, ms).UTC())
			}
		})
	}
}

// TestClockJumpConfirmed: a real gap in the data (event time jumps ten days
// ahead) is confirmed by the events after it; nothing is rejected and the
// answers equal a replay without the guard.
func TestClockJumpConfirmed(t *testing.T) {
	var in bytes.Buffer
	start := time.Date(2026, 10, 1, 8, 0, 0, 0, time.UTC)
	for i := range 300 {
		ts := start.Add(time.Duration(i) * time.Minute)
		if i >= 150 {
			ts = ts.Add(10 * day)
		}
		u := fmt.Sprintf("u%d", i%40)
		if i%3 == 0 {
			fmt.Fprintf(&in, `{"id":"t%d","user":"%s","time":"%s","kind":"touch","channel":"c%d"}`+"\n", i, u, ts.Format(time.RFC3339), i%4)
		} else {
			fmt.Fprintf(&in, `{"id":"a%d","user":"%s","time":"%s","kind":"action","action":"purchase","value":2}`+"\n", i, u, ts.Format(time.RFC3339))
		}
	}
	guarded := testConfig()
	guarded.MaxJump = day
	off := testConfig()
	a, b := t.TempDir(), t.TempDir()
	cpA := replayBytes(t, a, guarded, "in", in.Bytes())
	cpB := replayBytes(t, b, off, "in", in.Bytes())
	if cpA.Counts.Accepted != 300 || cpA.Counts.RejectedTotal() != 0 || cpA.Counts.Late != 0 {
		t.Errorf("counts %+v: want 300 accepted, nothing rejected", cpA.Counts)
	}
	if !reflect.DeepEqual(answers(t, a), answers(t, b)) || cpA.Counts.Accepted != cpB.Counts.Accepted {
		t.Errorf("answers with the guard differ from those without it")
	}
}

// failingReader fails after n bytes, as a killed replay stops mid-file.
type failingReader struct {
	r io.Reader
	n int
}

var errCut = errors.New("cut")

func (f *failingReader) Read(p []byte) (int, error) {
	if f.n <= 0 {
		return 0, errCut
	}
	if len(p) > f.n {
		p = p[:f.n]
	}
	k, err := f.r.Read(p)
	f.n -= k
	return k, err
}

// TestClockResumeDecidesAlike interrupts a replay while events are held
// aside (they are listed as pending in the checkpoint) and resumes it: the
// outcome equals an uninterrupted replay.
func TestClockResumeDecidesAlike(t *testing.T) {
	base := demoInput(t, 1000, 4)
	n := bytes.Count(base, []byte("\n"))
	input := insertLine(base, n/2, `{"id":"p","user":"mallory","time":"2090-01-01T00:00:00Z","kind":"action","action":"x"}`)
	input = insertLine(input, n/5, `{"id":"r","user":"mallory","time":"2091-01-01T00:00:00Z","kind":"action","action":"x"}`)
	cfg := testConfig()
	cfg.MaxJump = day
	cfg.CommitEvents = 300
	whole := t.TempDir()
	wantCP := replayBytes(t, whole, cfg, "in", input)
	dir := t.TempDir()
	half := bytes.Index(input, []byte(`"id":"p"`)) + 2000 // shortly after the first poison
	for _, cut := range []int{len(input) / 5, half, half + 3000} {
		func() {
			st, err := state.Open(context.Background(), state.DefaultOptions(dir))
			if err != nil {
				t.Fatal(err)
			}
			defer st.Close()
			rf, err := OpenRejectFile(filepath.Join(dir, "rejects.jsonl"))
			if err != nil {
				t.Fatal(err)
			}
			defer rf.Close()
			p, err := New(st, cfg, rf, nil)
			if err != nil {
				t.Fatal(err)
			}
			if _, err := Replay(context.Background(), p, "in", &failingReader{r: bytes.NewReader(input), n: cut}, cfg.Limits.MaxPayload); !errors.Is(err, errCut) {
				t.Fatalf("cut replay: %v", err)
			}
			p.Close()
		}()
	}
	gotCP := replayBytes(t, dir, cfg, "in", input)
	if !reflect.DeepEqual(gotCP.Counts, wantCP.Counts) {
		t.Errorf("counts after resuming %+v, uninterrupted %+v", gotCP.Counts, wantCP.Counts)
	}
	if wantCP.Counts.Rejected[event.ReasonFuture] != 2 {
		t.Errorf("future rejects %d, want 2", wantCP.Counts.Rejected[event.ReasonFuture])
	}
	if !reflect.DeepEqual(answers(t, dir), answers(t, whole)) {
		t.Error("answers after resuming differ from an uninterrupted replay")
	}
}

// TestClockMaxFutureLive: live input (Config.Now set) rejects an event more
// than MaxFuture ahead of the wall clock and accepts one just inside it.
func TestClockMaxFutureLive(t *testing.T) {
	now := time.Date(2026, 12, 2, 12, 0, 0, 0, time.UTC)
	cfg := testConfig()
	cfg.Now = func() time.Time { return now }
	cfg.MaxFuture = 10 * time.Minute
	cfg.MaxJump = day // not used live
	st, err := state.Open(context.Background(), state.DefaultOptions(t.TempDir()))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	p, err := New(st, cfg, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	if _, err := p.Begin("live"); err != nil {
		t.Fatal(err)
	}
	for i, ts := range []time.Time{now.Add(-time.Hour), now.Add(9 * time.Minute), now.Add(11 * time.Minute), now.Add(30 * day)} {
		line := fmt.Sprintf(`{"id":"e%d","user":"u","time":"%s","kind":"action","action":"x"}`, i, ts.Format(time.RFC3339))
		if err := p.Offer(context.Background(), uint64(i+1), []byte(line)); err != nil {
			t.Fatal(err)
		}
	}
	c := p.Counts()
	if c.Rejected[event.ReasonFuture] != 2 {
		t.Errorf("future rejects %d, want 2 (11 minutes and 30 days ahead)", c.Rejected[event.ReasonFuture])
	}
	if _, ms := p.Watermark(); ms != now.Add(9*time.Minute).UnixNano() {
		t.Errorf("largest time seen %s, want the clock + 9 m", time.Unix(0, ms).UTC())
	}
}

// TestReplayStopsOnLowDisk (issue 9 item 4): a replay refuses to start
// below the free-space reserve, stops between chunks after committing what
// it read when space runs low, and resumes when run again: the counts then
// equal one clean replay.
func TestReplayStopsOnLowDisk(t *testing.T) {
	input := demoInput(t, 1500, 4)
	cfg := testConfig()
	cfg.CommitEvents = 500
	var checks atomic.Int64
	lowAfter := int64(-1)
	cfg.Disk = &state.DiskGuard{MinFree: 1 << 30, Stat: func(string) (uint64, uint64, error) {
		n := checks.Add(1)
		if lowAfter >= 0 && n > lowAfter {
			return 1 << 20, 1 << 40, nil
		}
		return 10 << 30, 1 << 40, nil
	}}
	clean := replayBytes(t, t.TempDir(), testConfig(), "in", input)
	dir := t.TempDir()
	run := func() error {
		st, err := state.Open(context.Background(), state.DefaultOptions(dir))
		if err != nil {
			t.Fatal(err)
		}
		defer st.Close()
		p, err := New(st, cfg, nil, nil)
		if err != nil {
			t.Fatal(err)
		}
		defer p.Close()
		_, err = Replay(context.Background(), p, "in", bytes.NewReader(input), cfg.Limits.MaxPayload)
		return err
	}
	lowAfter = 0
	if err := run(); !errors.Is(err, state.ErrDiskLow) {
		t.Fatalf("replay on a low disk: %v, want ErrDiskLow", err)
	}
	checks.Store(0)
	lowAfter = 3 // a few chunks, then low
	if err := run(); !errors.Is(err, state.ErrDiskLow) || !strings.Contains(err.Error(), "run it again when space is back") {
		t.Fatalf("replay running out of space: %v", err)
	}
	lowAfter = -1
	if err := run(); err != nil {
		t.Fatal(err)
	}
	st, err := state.Open(context.Background(), state.DefaultOptions(dir))
	if err != nil {
		t.Fatal(err)
	}
	r := st.NewReader()
	b, _ := r.Checkpoint("in")
	r.Discard()
	st.Close()
	var cp Checkpoint
	if err := cp.UnmarshalBinary(b); err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(cp.Counts, clean.Counts) {
		t.Errorf("counts after stopping and resuming %+v, clean %+v", cp.Counts, clean.Counts)
	}
}
