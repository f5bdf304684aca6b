package pipeline

import (
	"bufio"
	"bytes"
	"compress/gzip"
	"context"
	"encoding/base64"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"unicode/utf8"

	"github.com/touchledger/touchledger/internal/event"
)

// Replay feeds a JSON-lines input to p as source, resuming from the source's
// checkpoint, and finishes it (draining the reorder buffer). Positions are
// line numbers starting at 1. Blank lines are not events and are skipped. A
// line longer than maxPayload is cut to maxPayload+1 bytes before it is
// offered, so it is rejected as too_large without holding it in memory.
// Input compressed with gzip is recognised by its magic bytes.
//
// Reading and decoding run on their own goroutine, in chunks, ahead of the
// processing goroutine.
//
// With Config.Disk set, a disk below its reserve stops the replay before
// anything is read, or between two chunks after committing what was read:
// it returns state.ErrDiskLow, and running it again once space is back
// resumes from that commit.
func Replay(ctx context.Context, p *Processor, source string, r io.Reader, maxPayload int) (Checkpoint, error) {
	if p.cfg.Disk != nil {
		if _, err := p.cfg.Disk.Check(); err != nil {
			return Checkpoint{}, fmt.Errorf("replay %s: %w", source, err)
		}
	}
	cp, err := p.Begin(source)
	if err != nil {
		return Checkpoint{}, err
	}
	br := bufio.NewReaderSize(r, 1<<20)
	if magic, _ := br.Peek(2); len(magic) == 2 && magic[0] == 0x1f && magic[1] == 0x8b {
		zr, err := gzip.NewReader(br)
		if err != nil {
			return Checkpoint{}, fmt.Errorf("replay %s: %w", source, err)
		}
		defer zr.Close()
		br = bufio.NewReaderSize(zr, 1<<20)
	}
	pending := make(map[uint64]bool, len(cp.Pending))
	for _, pos := range cp.Pending {
		pending[pos] = true
	}
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	in := readFile(ctx, br, p.NewDecoder(), cp.Next, pending, maxPayload)
	for c := range in.Chunks() {
		if p.cfg.Disk != nil {
			if _, derr := p.cfg.Disk.Check(); derr != nil {
				in.Release(c)
				if err := p.Finish(ctx, false); err != nil {
					return Checkpoint{}, err
				}
				return Checkpoint{}, fmt.Errorf("replay %s stopped after committing what was read (run it again when space is back to resume): %w", source, derr)
			}
		}
		_, err := p.OfferChunk(ctx, c, 0)
		in.Release(c)
		if err != nil {
			return Checkpoint{}, err
		}
	}
	if err := in.Err(); err != nil {
		return Checkpoint{}, fmt.Errorf("replay %s: %w", source, err)
	}
	if err := ctx.Err(); err != nil {
		return Checkpoint{}, err
	}
	if err := p.Finish(ctx, true); err != nil {
		return Checkpoint{}, err
	}
	return p.ckpt, nil
}

const chunkLines = 512

// fileInput is the InputSource of a replay: a goroutine reads lines, skips
// those committed before (readmitting the pending ones), decodes the rest
// and hands them over in chunks.
type fileInput struct {
	pool *ChunkPool
	out  chan *Chunk
	err  error // set before out is closed
}

var _ InputSource = (*fileInput)(nil)

func (f *fileInput) Chunks() <-chan *Chunk { return f.out }
func (f *fileInput) Err() error            { return f.err }
func (f *fileInput) Release(c *Chunk)      { f.pool.Put(c) }

// readFile starts reading br after position next (but for pending).
func readFile(ctx context.Context, br *bufio.Reader, dec *event.Decoder, next uint64, pending map[uint64]bool, maxPayload int) *fileInput {
	f := &fileInput{pool: NewChunkPool(6), out: make(chan *Chunk, 4)}
	go f.read(ctx, br, dec, next, pending, maxPayload)
	return f
}

func (f *fileInput) read(ctx context.Context, br *bufio.Reader, dec *event.Decoder, next uint64, pending map[uint64]bool, maxPayload int) {
	defer close(f.out)
	c, ok := f.pool.Get(ctx)
	if !ok {
		return
	}
	send := func() bool {
		select {
		case f.out <- c:
		case <-ctx.Done():
			return false
		}
		c, ok = f.pool.Get(ctx)
		return ok
	}
	var (
		pos  uint64
		line []byte
	)
	for {
		var err error
		line, err = readLine(br, line[:0], maxPayload)
		if len(line) == 0 && err != nil {
			if !errors.Is(err, io.EOF) {
				f.err = fmt.Errorf("line %d: %w", pos+1, err)
			}
			break
		}
		pos++
		payload := bytes.TrimSpace(line)
		if len(payload) == 0 {
			continue
		}
		readmit := false
		if pos < next {
			if !pending[pos] {
				continue
			}
			readmit = true
		}
		ev, derr := dec.Decode(payload)
		c.AddCopy(Input{Origin: Origin{Pos: pos}, Payload: payload, Event: ev, Err: derr, Readmit: readmit})
		if len(c.Inputs) == chunkLines && !send() {
			return
		}
		if errors.Is(err, io.EOF) {
			break
		}
	}
	if len(c.Inputs) > 0 {
		select {
		case f.out <- c:
		case <-ctx.Done():
		}
	}
}

// readLine reads one line without its newline into dst, keeping at most
// limit+1 bytes of it.
func readLine(br *bufio.Reader, dst []byte, limit int) ([]byte, error) {
	for {
		chunk, err := br.ReadSlice('\n')
		if room := limit + 1 - len(dst); room > 0 {
			if len(chunk) > room {
				dst = append(dst, chunk[:room]...)
			} else {
				dst = append(dst, chunk...)
			}
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

// RejectFile is a RejectSink writing JSON lines:
//
//	{"line":12,"reason":"bad_time","error":"…","text":"original line"}
//
// with "base64" instead of "text" when the original is not valid UTF-8.
type RejectFile struct {
	f    *os.File
	w    *bufio.Writer
	off  int64
	path string
	max  int64 // rotate at start when the committed file is larger; 0 = never
	keep int   // rotated files kept (path.1 … path.keep)

	acceptLoss bool // AcceptLoss
}

// OpenRejectFile opens (creating) path for appending rejects.
func OpenRejectFile(path string) (*RejectFile, error) {
	f, err := os.OpenFile(path, os.O_RDWR|os.O_CREATE, 0o640)
	if err != nil {
		return nil, fmt.Errorf("open rejects file: %w", err)
	}
	return &RejectFile{f: f, w: bufio.NewWriterSize(f, 64<<10), path: path}, nil
}

// Rotate sets rotation: when the committed file is larger than maxBytes at
// start (Reset), it is renamed to path.1 (older ones shift up to path.keep,
// the oldest is removed) and a new file begins. Only committed records are
// ever rotated, so a crash between the rename and the next commit is
// recognised by path.1 having exactly the committed length.
func (r *RejectFile) Rotate(maxBytes int64, keep int) { r.max, r.keep = maxBytes, keep }

// ErrRejectsChanged is returned by Reset when the rejects file is shorter
// than its committed length.
var ErrRejectsChanged = errors.New("rejects file changed")

// AcceptLoss lets Reset go on with a rejects file shorter than committed
// (deleted or cut by hand), appending after what is left.
func (r *RejectFile) AcceptLoss() { r.acceptLoss = true }

// Reset truncates the file to mark, dropping records written after the last
// commit (they will be written again when their inputs are read again), and
// rotates the file if it has grown past the limit.
func (r *RejectFile) Reset(mark int64) error {
	st, err := r.f.Stat()
	if err != nil {
		return err
	}
	if st.Size() < mark {
		if prev, err := os.Stat(r.path + ".1"); err == nil && prev.Size() == mark && st.Size() == 0 {
			mark = 0 // rotated after the last commit: the new file starts empty
		} else if r.acceptLoss {
			mark = st.Size() // go on after what is left; the counts keep the lost records
		} else {
			return fmt.Errorf("%w: %s is shorter (%d bytes) than committed (%d bytes), changed or deleted outside touchledger: restore it, or run again with --rejects-lost to go on with it as it is (the missing records stay lost; the reject counts keep them)",
				ErrRejectsChanged, r.f.Name(), st.Size(), mark)
		}
	}
	if r.max > 0 && mark > r.max {
		if err := r.rotate(mark); err != nil {
			return fmt.Errorf("rotate rejects file: %w", err)
		}
		mark = 0
	}
	if err := r.f.Truncate(mark); err != nil {
		return err
	}
	if _, err := r.f.Seek(mark, io.SeekStart); err != nil {
		return err
	}
	r.off = mark
	r.w.Reset(r.f)
	return nil
}

type rejectRecord struct {
	Line   uint64       `json:"line"`
	Reason event.Reason `json:"reason"`
	Error  string       `json:"error"`
	Text   *string      `json:"text,omitempty"`
	Base64 string       `json:"base64,omitempty"`
}

// Reject appends one record.
func (r *RejectFile) Reject(o Origin, reason event.Reason, msg string, payload []byte) error {
	pos := o.Pos
	rec := rejectRecord{Line: pos, Reason: reason, Error: msg}
	if utf8.Valid(payload) {
		s := string(payload)
		rec.Text = &s
	} else {
		rec.Base64 = base64.StdEncoding.EncodeToString(payload)
	}
	b, err := json.Marshal(rec)
	if err != nil {
		return err
	}
	b = append(b, '\n')
	n, err := r.w.Write(b)
	r.off += int64(n)
	return err
}

// rotate truncates the file to the committed length, shifts the rotated
// files and starts a new one.
func (r *RejectFile) rotate(mark int64) error {
	if err := r.f.Truncate(mark); err != nil {
		return err
	}
	if err := r.f.Sync(); err != nil {
		return err
	}
	keep := max(r.keep, 1)
	os.Remove(fmt.Sprintf("%s.%d", r.path, keep))
	for i := keep - 1; i >= 1; i-- {
		os.Rename(fmt.Sprintf("%s.%d", r.path, i), fmt.Sprintf("%s.%d", r.path, i+1))
	}
	if err := os.Rename(r.path, r.path+".1"); err != nil {
		return err
	}
	r.f.Close()
	f, err := os.OpenFile(r.path, os.O_RDWR|os.O_CREATE|os.O_TRUNC, 0o640)
	if err != nil {
		return err
	}
	r.f = f
	return nil
}

// Sync flushes and fsyncs, returning the file length.
func (r *RejectFile) Sync() (int64, error) {
	if err := r.w.Flush(); err != nil {
		return 0, err
	}
	if err := r.f.Sync(); err != nil {
		return 0, err
	}
	return r.off, nil
}

// Close flushes and closes the file.
func (r *RejectFile) Close() error {
	if err := r.w.Flush(); err != nil {
		r.f.Close()
		return err
	}
	return r.f.Close()
}
