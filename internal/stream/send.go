package stream

import (
	"bufio"
	"bytes"
	"compress/gzip"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"strconv"
	"strings"
	"time"
	"unicode/utf8"

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
	// RetryFor is how long Send keeps re-publishing while the oldest
	// unacknowledged message makes no progress (default 2 m): long
	// enough for a worker hosting the embedded server to be restarted.
	RetryFor time.Duration
	// AckTimeout is how long to wait for one acknowledgement (default 10 s).
	AckTimeout time.Duration
	// Dial, if set, opens a new connection. Send calls it when it has no
	// connection (js nil) and whenever the current one is closed or has
	// reconnected by itself, and closes the connections it opened before
	// it returns. Pass a Dial whose connections do not reconnect on their
	// own (ConnectOptions.NoReconnect): only then is the input order kept
	// across a connection loss without exception (see Send).
	Dial func(ctx context.Context) (jetstream.JetStream, error)
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
		RetryFor:    2 * time.Minute,
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
	if o.RetryFor <= 0 {
		o.RetryFor = d.RetryFor
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
	Duplicates int64         // messages the stream already had (same message id inside its window), including this Send's own earlier attempts stored before a connection loss
	Unparsed   int64         // lines that are not valid events (published for the worker to reject)
	Retried    int64         // publications repeated after a failed or late acknowledgement or a connection loss
	Rewinds    int64         // times publishing restarted from the oldest unacknowledged message
	Delivered  int64         // the input line number up to which every line is acknowledged
	Bytes      int64         // input bytes read
	Took       time.Duration // wall time
}

// ErrSendAborted wraps the error that stopped Send after some lines were
// published; the stats say how far it got.
var ErrSendAborted = errors.New("send aborted")

// ErrUndelivered wraps the error of a line Send gave up on after
// RetryFor; the message names the line.
var ErrUndelivered = errors.New("not delivered")

// Send publishes a JSON-lines input (one event per line, blank lines
// skipped, gzip recognised by its magic bytes) to the input subjects:
// <prefix>.in.<kind>.<UserKey(user)> with the event id as Nats-Msg-Id, so
// the stream drops a repeat inside its de-duplication window and the
// server's mapping sends every event of a user to the same partition.
//
// Each line is decoded with the event contract but without size limits on
// names and without a currency check, so only a line that no configuration
// would accept is "unparsed". Unparsed lines are still published, to
// <prefix>.in.action.<xxhash64 of the line> (or, when the line is still a
// JSON object naming a "user", to that user's subject, so their partition
// holds it and an erasure finds it) with the message id
// raw-<that hash>-<line number>: the worker rejects them into dead letters
// with their reason, as a replay rejects them into its rejects file, and a
// repeated send of the same file does not duplicate them.
//
// Order. Publishing is asynchronous with at most MaxInFlight
// unacknowledged messages, and the stream receives the lines in input
// order, also across failures: when an acknowledgement fails or is late,
// or the connection is lost, Send forgets every pending publication and
// publishes again from the oldest unacknowledged line onward, in order, on
// a fresh connection when Dial is set. Of what one connection carried the
// server stored a prefix, so what it already has is dropped by message id
// and the rest follows in input order. (A connection that reconnects by
// itself may carry the first messages after the reconnection ahead of
// earlier ones it lost; Send notices the reconnection at the next
// publication and rewinds, but one message may already be ahead. Hence
// Dial with NoReconnect.)
//
// Send keeps trying while the oldest unacknowledged line has been failing
// for less than RetryFor, with pauses growing from 100 ms to 2 s; then it
// returns ErrUndelivered naming that line (every earlier line is in the
// stream: SendStats.Delivered). It returns after every line is
// acknowledged.
func Send(ctx context.Context, js jetstream.JetStream, r io.Reader, o SendOptions) (SendStats, error) {
	o = o.withDefaults()
	if err := checkToken("prefix", o.Prefix); err != nil {
		return SendStats{}, err
	}
	if js == nil && o.Dial == nil {
		return SendStats{}, errors.New("send: no connection and no Dial")
	}
	s := sender{ctx: ctx, js: js, o: o, start: time.Now(), pause: minPause}
	defer s.closeOwn()
	if js == nil {
		// The first connection; a failure here is retried like a lost one.
		if js, err := o.Dial(ctx); err == nil {
			s.js = js
			s.own = append(s.own, js.Conn())
		}
	}
	if s.js != nil {
		s.reconnects = s.js.Conn().Stats().Reconnects
	}
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
		err = s.pump(true)
	}
	s.stats.Bytes = cr.n
	s.stats.Took = time.Since(s.start)
	if s.o.Progress != nil {
		s.draw(true)
	}
	if err != nil {
		return s.stats, fmt.Errorf("%w after %d lines (lines up to %d delivered): %w", ErrSendAborted, s.stats.Lines, s.stats.Delivered, err)
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

// outgoing is one line on its way: f is nil until it is published on the
// current connection.
type outgoing struct {
	msg  *nats.Msg
	id   string
	line int64
	f    jetstream.PubAckFuture
	at   time.Time // when it was published: its acknowledgement is due by at + AckTimeout
}

const (
	minPause = 100 * time.Millisecond
	maxPause = 2 * time.Second
	// pollConn is how often a wait for an acknowledgement looks at the
	// connection's state.
	pollConn = 50 * time.Millisecond
)

// sender holds the lines not yet acknowledged, oldest first:
// queue[head:sent] are published on the current connection (in order),
// queue[sent:] wait to be (after a rewind).
type sender struct {
	ctx        context.Context
	js         jetstream.JetStream
	own        []*nats.Conn // connections from Dial, closed at the end
	reconnects uint64       // the connection's reconnection count when the current run of publications began
	o          SendOptions
	in         *countingReader
	start      time.Time
	stats      SendStats
	queue      []outgoing
	head, sent int
	failing    time.Time // since when the oldest line fails; zero while it progresses
	pause      time.Duration
	timer      *time.Timer
	lastDraw   time.Time
	note       string // shown on the progress line while retrying
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
			if err := s.add(dec, payload, lineNo); err != nil {
				return err
			}
		}
		if errors.Is(err, io.EOF) {
			return nil
		}
	}
}

// add queues one line and publishes what the window allows.
func (s *sender) add(dec *event.Decoder, payload []byte, lineNo int64) error {
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
		if u, kind := probeUser(payload); u != "" {
			// Still a person's event: on their subject, so it lands in
			// their partition and an erasure finds it.
			if s.o.SubjectUser != nil {
				u = s.o.SubjectUser(u)
			}
			subject = Subject(s.o.Prefix, kind, u)
		}
		id = "raw-" + key + "-" + strconv.FormatInt(lineNo, 10)
		s.stats.Unparsed++
	}
	msg := &nats.Msg{Subject: subject, Data: append([]byte(nil), payload...), Header: nats.Header{}}
	s.queue = append(s.queue, outgoing{msg: msg, id: id, line: lineNo})
	if err := s.pump(false); err != nil {
		return err
	}
	if s.o.Progress != nil && s.stats.Lines&255 == 0 && time.Since(s.lastDraw) >= 200*time.Millisecond {
		s.draw(false)
	}
	return nil
}

func (s *sender) inFlight() int { return s.sent - s.head }

// pump publishes queued lines in order while the window has room and
// waits for the oldest acknowledgement while it has none; with all, it
// returns only once every line is acknowledged.
func (s *sender) pump(all bool) error {
	for {
		if err := s.publishQueued(); err != nil {
			return err
		}
		if s.head == len(s.queue) {
			return nil
		}
		if !all && s.sent == len(s.queue) && s.inFlight() < s.o.MaxInFlight {
			return nil
		}
		if err := s.settleOldest(); err != nil {
			return err
		}
	}
}

// publishQueued publishes queue[sent:] in order while the window has room.
func (s *sender) publishQueued() error {
	for s.sent < len(s.queue) && s.inFlight() < s.o.MaxInFlight {
		if err := s.ctx.Err(); err != nil {
			return err
		}
		if s.js == nil || s.connChanged() {
			// A reconnection may have lost what the old connection
			// carried: everything unacknowledged goes again, in order.
			if err := s.rewind(errConnLost); err != nil {
				return err
			}
			continue
		}
		if s.sent > s.head {
			// The newest publication already failed (a stream without a
			// leader answers at once): an older one may be lost too, so
			// publish nothing newer before going back to the oldest.
			select {
			case err := <-s.queue[s.sent-1].f.Err():
				if err := s.rewind(err); err != nil {
					return err
				}
				continue
			default:
			}
		}
		o := &s.queue[s.sent]
		f, err := s.js.PublishMsgAsync(o.msg, jetstream.WithMsgID(o.id))
		if err != nil {
			if err := s.rewind(err); err != nil {
				return err
			}
			continue
		}
		o.f, o.at = f, time.Now()
		s.sent++
	}
	return nil
}

var errConnLost = errors.New("connection lost")

// connChanged reports whether the current connection is closed, not
// connected, or reconnected since the current run of publications began.
func (s *sender) connChanged() bool {
	nc := s.js.Conn()
	return nc.IsClosed() || !nc.IsConnected() || nc.Stats().Reconnects != s.reconnects
}

// settleOldest waits for the oldest published line's acknowledgement; a
// failure rewinds.
func (s *sender) settleOldest() error {
	p := &s.queue[s.head]
	var ferr error
	select {
	case ack := <-p.f.Ok():
		s.acked(ack)
		return nil
	case ferr = <-p.f.Err():
	default:
		// The deadline counts from the publication, not from now: when a
		// node fails, the acknowledgements of every message in flight are
		// lost together, and they time out together instead of one
		// AckTimeout after another.
		deadline := p.at.Add(s.o.AckTimeout)
		if s.timer == nil {
			s.timer = time.NewTimer(pollConn)
		}
	wait:
		for {
			s.timer.Reset(min(max(time.Until(deadline), 0), pollConn))
			select {
			case ack := <-p.f.Ok():
				s.timer.Stop()
				s.acked(ack)
				return nil
			case ferr = <-p.f.Err():
				s.timer.Stop()
				break wait
			case <-s.timer.C:
				if !time.Now().Before(deadline) {
					ferr = fmt.Errorf("no acknowledgement within %v", s.o.AckTimeout)
					break wait
				}
				if s.connChanged() {
					ferr = errConnLost
					break wait
				}
			case <-s.ctx.Done():
				s.timer.Stop()
				return s.ctx.Err()
			}
		}
	}
	return s.rewind(ferr)
}

// acked counts the oldest line's acknowledgement and drops it.
func (s *sender) acked(ack *jetstream.PubAck) {
	if ack.Duplicate {
		s.stats.Duplicates++
	} else {
		s.stats.Stored++
	}
	s.stats.Delivered = s.queue[s.head].line
	s.queue[s.head] = outgoing{}
	s.head++
	s.failing, s.pause, s.note = time.Time{}, minPause, ""
	if s.head > 4096 && s.head*2 > len(s.queue) {
		n := copy(s.queue, s.queue[s.head:])
		clear(s.queue[n:])
		s.queue = s.queue[:n]
		s.sent -= s.head
		s.head = 0
	}
}

// rewind forgets every pending publication, pauses, gets a working
// connection (dialling a new one when the old is gone and Dial is set),
// and leaves the oldest unacknowledged line to be published next. It
// gives up with ErrUndelivered once the oldest line has failed for
// RetryFor.
func (s *sender) rewind(cause error) error {
	for {
		now := time.Now()
		if s.failing.IsZero() {
			s.failing = now
		}
		if now.Sub(s.failing) >= s.o.RetryFor {
			if s.head < len(s.queue) {
				o := s.queue[s.head]
				return fmt.Errorf("line %d (id %q, subject %s) %w after %v: %w", o.line, o.id, o.msg.Subject, ErrUndelivered, s.o.RetryFor, cause)
			}
			return fmt.Errorf("%w after %v: %w", ErrUndelivered, s.o.RetryFor, cause)
		}
		s.stats.Rewinds++
		s.stats.Retried += int64(s.sent - s.head)
		for i := s.head; i < s.sent; i++ {
			s.queue[i].f = nil
		}
		s.sent = s.head
		s.note = "retrying: " + cause.Error()
		if s.o.Progress != nil {
			s.draw(false)
		}
		select {
		case <-time.After(s.pause):
		case <-s.ctx.Done():
			return s.ctx.Err()
		}
		s.pause = min(2*s.pause, maxPause)
		if s.js != nil && !s.js.Conn().IsClosed() && (s.o.Dial == nil || s.js.Conn().IsConnected()) {
			// Still usable (or it reconnects by itself): carry on from the
			// oldest line on it.
			if s.js.Conn().IsConnected() {
				s.reconnects = s.js.Conn().Stats().Reconnects
				return nil
			}
			continue
		}
		if s.o.Dial == nil {
			cause = fmt.Errorf("%w: %w", errConnLost, nats.ErrConnectionClosed)
			continue
		}
		if s.js != nil {
			s.js.Conn().Close()
			s.js = nil
		}
		js, err := s.o.Dial(s.ctx)
		if err != nil {
			cause = err
			continue
		}
		s.js = js
		s.own = append(s.own, js.Conn())
		s.reconnects = js.Conn().Stats().Reconnects
		return nil
	}
}

// closeOwn closes the connections Send dialled.
func (s *sender) closeOwn() {
	for _, nc := range s.own {
		nc.Close()
	}
}

// probeUser returns the user and kind (touch or action) of an invalid line
// that is still a JSON object with a non-empty string "user", or "".
func probeUser(payload []byte) (user, kind string) {
	var probe struct {
		User string `json:"user"`
		Kind string `json:"kind"`
	}
	if json.Unmarshal(payload, &probe) != nil || probe.User == "" || !utf8.ValidString(probe.User) {
		return "", ""
	}
	if probe.Kind == KindTouch {
		return probe.User, KindTouch
	}
	return probe.User, KindAction
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
	fmt.Fprintf(&b, "%d lines  %.1fk/s  %d unacknowledged ", s.stats.Lines, rate/1000, len(s.queue)-s.head)
	if s.note != "" && !final {
		fmt.Fprintf(&b, " (%.60s)", s.note)
	}
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
