package stream

import (
	"bytes"
	"compress/gzip"
	"context"
	"errors"
	"fmt"
	"net"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"
)

// storedSubjects reads every message of the events stream in order.
func storedSubjects(t *testing.T, b *bus) (subjects, ids []string, data []string) {
	t.Helper()
	ctx := context.Background()
	c, err := b.js.OrderedConsumer(ctx, b.cfg.Stream, jetstream.OrderedConsumerConfig{})
	if err != nil {
		t.Fatal(err)
	}
	n := int(b.lastSeq(t))
	batch, err := c.Fetch(n, jetstream.FetchMaxWait(2*time.Second))
	if err != nil {
		t.Fatal(err)
	}
	for m := range batch.Messages() {
		subjects = append(subjects, m.Subject())
		ids = append(ids, m.Headers().Get("Nats-Msg-Id"))
		data = append(data, string(m.Data()))
	}
	if len(subjects) != n {
		t.Fatalf("read %d of %d messages", len(subjects), n)
	}
	return subjects, ids, data
}

func TestSendSubjectsAndIDs(t *testing.T) {
	cfg := DefaultConfig()
	b := startBus(t, cfg)
	long := `{"id":"big","user":"ann","time":"2026-10-01T00:00:00Z","kind":"action","action":"` + strings.Repeat("x", 70<<10) + `"}`
	input := strings.Join([]string{
		`{"id":"e1","user":"ann","time":"2026-10-01T00:00:00Z","kind":"touch","channel":"email"}`,
		``,
		`{"id":"e2","user":"ann","time":"2026-10-01T00:01:00Z","kind":"action","action":"product_view"}`,
		`garbage`,
		long,
		`{"id":"e1","user":"ann","time":"2026-10-01T00:00:00Z","kind":"touch","channel":"email"}`, // same id: dropped by the stream
		`{"id":"e3","user":"bob","time":"2026-10-01T00:02:00Z","kind":"action","action":"product_view","currency":"XYZ","campaign_name_that_is_unknown":1}`,
	}, "\n")
	st, err := Send(context.Background(), b.js, strings.NewReader(input), SendOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if st.Lines != 6 || st.Stored != 5 || st.Duplicates != 1 || st.Unparsed != 2 {
		t.Errorf("stats %+v: want 6 lines, 5 stored, 1 duplicate, 2 unparsed", st)
	}
	subjects, ids, data := storedSubjects(t, b)
	ann, bob := UserKey("ann"), UserKey("bob")
	want := []struct{ kind, key, id string }{
		{"touch", ann, "e1"},
		{"action", ann, "e2"},
		{"action", hashKey("garbage"), "raw-" + hashKey("garbage") + "-4"},
		{"action", "", ""}, // the cut long line: checked below
		{"action", bob, "e3"},
	}
	var part string
	for i, w := range want {
		tok := strings.Split(subjects[i], ".")
		if len(tok) != 5 || tok[0] != "tl" || tok[1] != "ev" || tok[3] != w.kind || (w.key != "" && tok[4] != w.key) {
			t.Errorf("message %d: subject %s, want tl.ev.<p>.%s.%s", i, subjects[i], w.kind, w.key)
		}
		if w.id != "" && ids[i] != w.id {
			t.Errorf("message %d: id %q, want %q", i, ids[i], w.id)
		}
		if p, err := strconv.Atoi(tok[2]); err != nil || p < 0 || p >= cfg.Partitions {
			t.Errorf("message %d: partition %q not in 0-%d", i, tok[2], cfg.Partitions-1)
		}
		if w.key == ann {
			if part == "" {
				part = tok[2]
			} else if tok[2] != part {
				t.Errorf("ann's events in partitions %s and %s", part, tok[2])
			}
		}
	}
	// The long line is cut to the payload limit + 1, so the worker rejects
	// it as too_large without the bus carrying 70 KiB.
	if got, wantLen := len(data[3]), DefaultSendOptions().MaxPayload+1; got != wantLen || !strings.HasPrefix(long, data[3]) {
		t.Errorf("long line stored with %d bytes, want its first %d", got, wantLen)
	}
	if !strings.HasPrefix(ids[3], "raw-") || !strings.HasSuffix(ids[3], "-5") {
		t.Errorf("long line id %q, want raw-<hash>-5", ids[3])
	}
}

func hashKey(line string) string {
	var b [16]byte
	return string(appendHex64(b[:0], xxhashSum(line)))
}

func TestSendGzipAndProgress(t *testing.T) {
	b := startBus(t, DefaultConfig())
	plain := demoInput(t, 200, 2)
	var gz bytes.Buffer
	zw := gzip.NewWriter(&gz)
	zw.Write(plain)
	zw.Close()
	var progress bytes.Buffer
	st, err := Send(context.Background(), b.js, bytes.NewReader(gz.Bytes()), SendOptions{Progress: &progress, Size: int64(gz.Len())})
	if err != nil {
		t.Fatal(err)
	}
	lines := int64(bytes.Count(plain, []byte("\n")))
	if st.Lines != lines || st.Stored != lines || st.Bytes != int64(gz.Len()) {
		t.Errorf("stats %+v: want %d lines stored and %d bytes read", st, lines, gz.Len())
	}
	out := progress.String()
	if !strings.Contains(out, "100% [") || !strings.Contains(out, strconv.FormatInt(lines, 10)+" lines") || !strings.HasSuffix(out, "\n") {
		t.Errorf("progress %q: want a final 100%% bar with the line count", out)
	}
}

func TestSendWithoutStreamFails(t *testing.T) {
	cfg := DefaultConfig()
	srv, url, err := StartEmbedded(t.TempDir(), EmbedPort(0))
	if err != nil {
		t.Fatal(err)
	}
	defer srv.Shutdown()
	b := &bus{url: url, cfg: cfg}
	nc, js := connectJS(t, url)
	defer nc.Close()
	b.js = js
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	_, err = Send(ctx, b.js, strings.NewReader(`{"id":"a","user":"u","time":"2026-10-01T00:00:00Z","kind":"action","action":"x"}`),
		SendOptions{RetryFor: 2 * time.Second, AckTimeout: time.Second})
	if !errors.Is(err, ErrSendAborted) {
		t.Fatalf("Send without a stream: %v, want ErrSendAborted", err)
	}
}

func TestStartEmbeddedPortTaken(t *testing.T) {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer ln.Close()
	port := ln.Addr().(*net.TCPAddr).Port
	start := time.Now()
	srv, _, err := StartEmbedded(t.TempDir(), EmbedPort(port))
	if err == nil {
		srv.Shutdown()
		t.Fatal("started on a port in use")
	}
	if took := time.Since(start); took > 5*time.Second {
		t.Errorf("took %v to notice the port in use", took)
	}
}

// TestSendSubjectUser: with pseudonymisation, subjects carry the key of the
// pseudonym, never a hash of the raw id (issue 6: ids are replaced before
// they are used anywhere, subjects included).
func TestSendSubjectUser(t *testing.T) {
	b := startBus(t, DefaultConfig())
	input := `{"id":"e1","user":"ann","time":"2026-10-01T00:00:00Z","kind":"touch","channel":"email"}`
	pseudo := func(u string) string { return "p1-pseudonym-of-" + u }
	if _, err := Send(context.Background(), b.js, strings.NewReader(input), SendOptions{SubjectUser: pseudo}); err != nil {
		t.Fatal(err)
	}
	subjects, _, _ := storedSubjects(t, b)
	if len(subjects) != 1 || !strings.HasSuffix(subjects[0], "."+UserKey(pseudo("ann"))) || strings.Contains(subjects[0], UserKey("ann")) {
		t.Errorf("subjects %v: want the key of the pseudonym %s, not of the raw id %s", subjects, UserKey(pseudo("ann")), UserKey("ann"))
	}
	c := DefaultConfig()
	c.SubjectUser = pseudo
	if f := c.UserFilter(c.SubjectUser("ann")); !strings.HasSuffix(f, UserKey(pseudo("ann"))) {
		t.Errorf("erasure filter %s does not use the pseudonym's key", f)
	}
}

// TestSendOrderAcrossRestarts restarts the server three times while Send
// publishes through Dial with connections that do not reconnect by
// themselves: every line must be in the stream, and the first copy of each
// in input order (issue 9: failed publications were re-sent behind newer
// ones, so the worker rejected them as late).
func TestSendOrderAcrossRestarts(t *testing.T) {
	cfg := DefaultConfig()
	dir := t.TempDir()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	port := ln.Addr().(*net.TCPAddr).Port
	ln.Close()
	start := func() (stop func()) {
		t.Helper()
		srv, _, err := StartEmbedded(dir, EmbedPort(port), EmbedConfig(cfg))
		if err != nil {
			t.Fatal(err)
		}
		return func() { srv.Shutdown(); srv.WaitForShutdown() }
	}
	stop := start()
	url := "nats://127.0.0.1:" + strconv.Itoa(port)
	nc, js := connectJS(t, url)
	if err := EnsureStream(context.Background(), js, cfg); err != nil {
		t.Fatal(err)
	}
	nc.Close()

	const n = 12000
	var in strings.Builder
	for i := range n {
		fmt.Fprintf(&in, `{"id":"e%d","user":"u%d","time":"2026-10-01T00:00:00Z","kind":"action","action":"x"}`+"\n", i, i%97)
	}
	dial := func(context.Context) (jetstream.JetStream, error) {
		nc, err := Connect(ConnectOptions{URL: url, NoReconnect: true}, nil)
		if err != nil {
			return nil, err
		}
		return jetstream.New(nc)
	}
	type result struct {
		st  SendStats
		err error
	}
	done := make(chan result, 1)
	go func() {
		st, err := Send(context.Background(), nil, strings.NewReader(in.String()), SendOptions{Rate: 6000, Dial: dial, RetryFor: 30 * time.Second})
		done <- result{st, err}
	}()
	for range 3 {
		time.Sleep(500 * time.Millisecond)
		stop()
		time.Sleep(300 * time.Millisecond)
		stop = start()
	}
	r := <-done
	defer stop()
	if r.err != nil {
		t.Fatal(r.err)
	}
	if r.st.Rewinds == 0 || r.st.Lines != n || r.st.Delivered != n {
		t.Fatalf("stats %+v: want rewinds, %d lines delivered", r.st, n)
	}
	nc, js = connectJS(t, url)
	defer nc.Close()
	_, ids, _ := storedSubjects(t, &bus{url: url, nc: nc, js: js, cfg: cfg})
	seen := map[string]bool{}
	next := 0
	for _, id := range ids {
		if seen[id] {
			continue
		}
		seen[id] = true
		if want := "e" + strconv.Itoa(next); id != want {
			t.Fatalf("message %d of the stream is %s, want %s (input order)", next, id, want)
		}
		next++
	}
	if next != n {
		t.Errorf("%d distinct lines stored, want %d", next, n)
	}
	t.Logf("%d lines, %d stored messages, %d rewinds, %d publications repeated", n, len(ids), r.st.Rewinds, r.st.Retried)
}
