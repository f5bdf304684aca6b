package stream

import (
	"bufio"
	"bytes"
	"compress/gzip"
	"context"
	"errors"
	"fmt"
	"io"
	"strconv"
	"strings"
	"time"

	"github.com/cespare/xxhash/v2"
	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"github.com/touchledger/touchledger/internal/event"
)

// SendOptions tune Send. Zero values take the defaults of DefaultSendOptions.
type SendOptions struct {
	// Prefix is the subject prefix (default "tl").
	Prefix string
	// MaxInFlight bounds the messages published and not yet acknowledged
	// by the stream (default 2048). Keep it at or below the JetStream
	// context's async pending limit (jetstream.WithPublishAsyncMaxPending,
	// 4000 unless set).
	MaxInFlight int
	// MaxPayload: a longer line is cut to MaxPayload+1 bytes before it is
	// published, so the worker rejects it as too_large without the bus
	// carrying it whole (default: the event contract's 64 KiB).
	MaxPayload int
	// Rate paces publishing to this many lines per second; 0 publishes as
	// fast as the stream acknowledges.
	Rate float64
	// Retries is how often a message whose acknowledgement failed or timed
	// out is published again, with the same message id (default 5).
	Retries int
	// AckTimeout is how long to wait for one acknowledgement (default 10 s).
	AckTimeout time.Duration
	// Progress, if set, receives a one-line progress bar redrawn in place
	// (pass standard error when it is a terminal).
	Progress io.Writer
	// Size is the input's size in bytes for the progress percentage; 0
	// shows counts only.
	Size int64
	// SubjectUser, if set, maps a user id to what the subject's user key
	// is computed from. With pseudonymisation on, pass the pseudonym
	// function, so subjects carry no hash of the raw id (which anyone could
	// recompute for a guessed id); the worker must use the same (Config).
	SubjectUser func(user string) string
}

// DefaultSendOptions returns Send's defaults.
func DefaultSendOptions() SendOptions {
	return SendOptions{
		Prefix:      "tl",
		MaxInFlight: 2048,
		MaxPayload:  event.DefaultLimits().MaxPayload,
		Retries:     5,
		AckTimeout:  10 * time.Second,
	}
}

func (o SendOptions) withDefaults() SendOptions {
	d := DefaultSendOptions()
	if o.Prefix == "" {
		o.Prefix = d.Prefix
	}
	if o.MaxInFlight <= 0 {
		o.MaxInFlight = d.MaxInFlight
	}
	if o.MaxPayload <= 0 {
		o.MaxPayload = d.MaxPayload
	}
	if o.Retries <= 0 {
		o.Retries = d.Retries
	}
	if o.AckTimeout <= 0 {
		o.AckTimeout = d.AckTimeout
	}
	return o
}

// SendStats count what Send did.
type SendStats struct {
	Lines      int64         // non-blank lines read
	Stored     int64         // messages the stream stored
	Duplicates int64         // messages the stream already had (same message id inside its window)
	Unparsed   int64         // lines that are not valid events (published for the worker to reject)
	Retried    int64         // publications repeated after a failed or late acknowledgement
	Bytes      int64         // input bytes read
	Took       time.Duration // wall time
}

// ErrSendAborted wraps the error that stopped Send after some lines were
// published; the stats say how far it got.
var ErrSendAborted = errors.New("send aborted")

// Send publishes a JSON-lines input (one event per line, blank lines
// skipped, gzip recognised by its magic bytes) to the input subjects:
// <prefix>.in.<kind>.<UserKey(user)> with the event id as Nats-Msg-Id, so
// the stream drops a repeat inside its de-duplication window and the
// server's mapping sends every event of a user to the same partition.
//
// Each line is decoded with the event contract but without size limits on
// names and without a currency check, so only a line that no configuration
// would accept is "unparsed". Unparsed lines are still published, to
// <prefix>.in.action.<xxhash64 of the line> with the message id
// raw-<that hash>-<line number>: the worker rejects them into dead letters
// with their reason, as a replay rejects them into its rejects file, and a
// repeated send of the same file does not duplicate them.
//
// Publishing is asynchronous with at most MaxInFlight unacknowledged
// messages; Send returns after every message is acknowledged. A message
// whose acknowledgement fails or times out is published again with the same
// id (the stream de-duplicates), up to Retries times.
func Send(ctx context.Context, js jetstream.JetStream, r io.Reader, o SendOptions) (SendStats, error) {
	o = o.withDefaults()
	if err := checkToken("prefix", o.Prefix); err != nil {
		return SendStats{}, err
	}
	s := sender{ctx: ctx, js: js, o: o, start: time.Now()}
	cr := &countingReader{r: r}
	s.in = cr
	br := bufio.NewReaderSize(cr, 1<<20)
	if magic, _ := br.Peek(2); len(magic) == 2 && magic[0] == 0x1f && magic[1] == 0x8b {
		zr, err := gzip.NewReader(br)
		if err != nil {
			return SendStats{}, fmt.Errorf("send: %w", err)
		}
		defer zr.Close()
		br = bufio.NewReaderSize(zr, 1<<20)
	}
	err := s.run(br)
	if err == nil {
		err = s.settleAll()
	}
	s.stats.Bytes = cr.n
	s.stats.Took = time.Since(s.start)
	if s.o.Progress != nil {
		s.draw(true)
	}
	if err != nil {
		return s.stats, fmt.Errorf("%w after %d lines: %w", ErrSendAborted, s.stats.Lines, err)
	}
	return s.stats, nil
}

type countingReader struct {
	r io.Reader
	n int64
}

func (c *countingReader) Read(p []byte) (int, error) {
	n, err := c.r.Read(p)
	c.n += int64(n)
	return n, err
}

type inflight struct {
	f   jetstream.PubAckFuture
	msg *nats.Msg
	id  string
	at  time.Time // when it was published: its acknowledgement is due by at + AckTimeout
}

type sender struct {
	ctx      context.Context
	js       jetstream.JetStream
	o        SendOptions
	in       *countingReader
	start    time.Time
	stats    SendStats
	queue    []inflight // oldest first
	head     int
	timer    *time.Timer
	lastDraw time.Time
}

func (s *sender) run(br *bufio.Reader) error {
	lim := event.Limits{MaxPayload: s.o.MaxPayload, MaxID: 1 << 30, MaxUser: 1 << 30, MaxName: 1 << 30}
	dec := event.NewDecoder(lim, "")
	var (
		line   []byte
		lineNo int64
	)
	for {
		var err error
		line, err = readLine(br, line[:0], s.o.MaxPayload)
		if len(line) == 0 && err != nil {
			if errors.Is(err, io.EOF) {
				return nil
			}
			return fmt.Errorf("line %d: %w", lineNo+1, err)
		}
		lineNo++
		if payload := bytes.TrimSpace(line); len(payload) > 0 {
			if err := s.publish(dec, payload, lineNo); err != nil {
				return err
			}
		}
		if errors.Is(err, io.EOF) {
			return nil
		}
	}
}

func (s *sender) publish(dec *event.Decoder, payload []byte, lineNo int64) error {
	if err := s.ctx.Err(); err != nil {
		return err
	}
	if s.o.Rate > 0 {
		due := s.start.Add(time.Duration(float64(s.stats.Lines) / s.o.Rate * float64(time.Second)))
		if wait := time.Until(due); wait > time.Millisecond {
			select {
			case <-time.After(wait):
			case <-s.ctx.Done():
				return s.ctx.Err()
			}
		}
	}
	s.stats.Lines++
	var subject, id string
	if e, err := dec.Decode(payload); err == nil {
		u := e.User
		if s.o.SubjectUser != nil {
			u = s.o.SubjectUser(u)
		}
		subject, id = Subject(s.o.Prefix, e.Kind.String(), u), e.ID
	} else {
		var hex [16]byte
		key := string(appendHex64(hex[:0], xxhash.Sum64(payload)))
		subject = s.o.Prefix + ".in." + KindAction + "." + key
		id = "raw-" + key + "-" + strconv.FormatInt(lineNo, 10)
		s.stats.Unparsed++
	}
	msg := &nats.Msg{Subject: subject, Data: append([]byte(nil), payload...), Header: nats.Header{}}
	for s.inFlight() >= s.o.MaxInFlight {
		if err := s.settleOldest(); err != nil {
			return err
		}
	}
	f, err := s.js.PublishMsgAsync(msg, jetstream.WithMsgID(id))
	if err != nil {
		// The async window of the JetStream context is full or the
		// connection is down: publish synchronously instead.
		if err := s.publishSync(msg, id, err); err != nil {
			return err
		}
	} else {
		s.queue = append(s.queue, inflight{f: f, msg: msg, id: id, at: time.Now()})
	}
	if s.o.Progress != nil && s.stats.Lines&255 == 0 && time.Since(s.lastDraw) >= 200*time.Millisecond {
		s.draw(false)
	}
	return nil
}

func (s *sender) inFlight() int { return len(s.queue) - s.head }

func (s *sender) settleAll() error {
	for s.inFlight() > 0 {
		if err := s.settleOldest(); err != nil {
			return err
		}
	}
	return nil
}

// settleOldest waits for the oldest unacknowledged message.
func (s *sender) settleOldest() error {
	p := s.queue[s.head]
	s.queue[s.head] = inflight{}
	s.head++
	if s.head > 4096 && s.head*2 > len(s.queue) {
		s.queue = append(s.queue[:0], s.queue[s.head:]...)
		s.head = 0
	}
	var ferr error
	select {
	case ack := <-p.f.Ok():
		s.count(ack)
		return nil
	case ferr = <-p.f.Err():
	default:
		// The deadline counts from the publication, not from now: when a
		// node fails, the acknowledgements of every message in flight are
		// lost together, and they time out together instead of one
		// AckTimeout after another.
		wait := max(time.Until(p.at.Add(s.o.AckTimeout)), 0)
		if s.timer == nil {
			s.timer = time.NewTimer(wait)
		} else {
			s.timer.Reset(wait)
		}
		select {
		case ack := <-p.f.Ok():
			s.timer.Stop()
			s.count(ack)
			return nil
		case ferr = <-p.f.Err():
			s.timer.Stop()
		case <-s.timer.C:
			ferr = fmt.Errorf("no acknowledgement within %v", s.o.AckTimeout)
		case <-s.ctx.Done():
			s.timer.Stop()
			return s.ctx.Err()
		}
	}
	return s.publishSync(p.msg, p.id, ferr)
}

func (s *sender) count(ack *jetstream.PubAck) {
	if ack.Duplicate {
		s.stats.Duplicates++
	} else {
		s.stats.Stored++
	}
}

// publishSync publishes msg again and waits, retrying with a growing pause.
// The message id makes a repeat harmless when an earlier attempt was stored.
func (s *sender) publishSync(msg *nats.Msg, id string, cause error) error {
	wait := 100 * time.Millisecond
	for attempt := 1; attempt <= s.o.Retries; attempt++ {
		s.stats.Retried++
		ctx, cancel := context.WithTimeout(s.ctx, s.o.AckTimeout)
		ack, err := s.js.PublishMsg(ctx, msg, jetstream.WithMsgID(id))
		cancel()
		if err == nil {
			s.count(ack)
			return nil
		}
		if s.ctx.Err() != nil {
			return s.ctx.Err()
		}
		cause = err
		select {
		case <-time.After(wait):
		case <-s.ctx.Done():
			return s.ctx.Err()
		}
		wait = min(2*wait, 2*time.Second)
	}
	return fmt.Errorf("publish %s (id %s): %w", msg.Subject, id, cause)
}

// draw redraws the progress line; final ends it with a newline.
func (s *sender) draw(final bool) {
	s.lastDraw = time.Now()
	el := time.Since(s.start).Seconds()
	rate := 0.0
	if el > 0 {
		rate = float64(s.stats.Lines) / el
	}
	var b strings.Builder
	b.WriteString("\rsend ")
	if s.o.Size > 0 {
		frac := min(1, float64(s.in.n)/float64(s.o.Size))
		if final {
			frac = 1
		}
		const width = 30
		full := int(frac * width)
		fmt.Fprintf(&b, "%3.0f%% [%s%s] ", 100*frac, strings.Repeat("#", full), strings.Repeat(".", width-full))
	}
	fmt.Fprintf(&b, "%d lines  %.1fk/s  %d unacknowledged ", s.stats.Lines, rate/1000, s.inFlight())
	if final {
		b.WriteString("\n")
	}
	io.WriteString(s.o.Progress, b.String())
}

// readLine reads one line without its newline into dst, keeping at most
// limit+1 bytes of it (the rest of a longer line is read and dropped).
func readLine(br *bufio.Reader, dst []byte, limit int) ([]byte, error) {
	for {
		chunk, err := br.ReadSlice('\n')
		if room := limit + 1 - len(dst); room > 0 {
			dst = append(dst, chunk[:min(len(chunk), room)]...)
		}
		if errors.Is(err, bufio.ErrBufferFull) {
			continue
		}
		if n := len(dst); n > 0 && dst[n-1] == '\n' {
			dst = dst[:n-1]
		}
		return dst, err
	}
}
