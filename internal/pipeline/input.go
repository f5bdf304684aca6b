package pipeline

import (
	"context"

	"github.com/touchledger/touchledger/internal/event"
)

// Input is one input of a chunk: where it came from, its payload and what
// the decoder made of it.
type Input struct {
	Origin
	Payload []byte
	Event   event.Event
	Err     error // the decoder's (a reject), nil when Event is valid
	// Readmit marks an input that was waiting in the reorder buffer when
	// the state was committed: it is read again into the buffer
	// (Processor.ReadmitDecoded), not offered.
	Readmit bool
}

// Chunk is a batch of decoded inputs in position order, reused through a
// ChunkPool.
type Chunk struct {
	Inputs []Input
	buf    []byte // copies of payloads (AddCopy)
}

// Add appends in; its payload must stay valid until the chunk is released.
func (c *Chunk) Add(in Input) { c.Inputs = append(c.Inputs, in) }

// AddCopy appends in with a copy of its payload kept in the chunk.
func (c *Chunk) AddCopy(in Input) {
	off := len(c.buf)
	c.buf = append(c.buf, in.Payload...)
	in.Payload = c.buf[off:len(c.buf):len(c.buf)]
	c.Inputs = append(c.Inputs, in)
}

func (c *Chunk) reset() {
	clear(c.Inputs)
	c.Inputs, c.buf = c.Inputs[:0], c.buf[:0]
}

// ChunkPool holds a fixed number of reusable chunks: an input's reader
// blocks when the processor has not released enough of them, which bounds
// the memory between reading and processing.
type ChunkPool struct{ free chan *Chunk }

// NewChunkPool returns a pool of n chunks.
func NewChunkPool(n int) *ChunkPool {
	p := &ChunkPool{free: make(chan *Chunk, n)}
	for range n {
		p.free <- &Chunk{}
	}
	return p
}

// Get returns an empty chunk, waiting for one to be released; ok is false
// when ctx ended first.
func (p *ChunkPool) Get(ctx context.Context) (c *Chunk, ok bool) {
	select {
	case c = <-p.free:
		return c, true
	case <-ctx.Done():
		return nil, false
	}
}

// Put empties c and gives it back.
func (p *ChunkPool) Put(c *Chunk) {
	c.reset()
	p.free <- c
}

// InputSource is what a processor reads: a replay file (Replay) or a
// JetStream consumer (internal/stream), each reading and decoding on its
// own goroutine and handing over chunks in position order.
type InputSource interface {
	// Chunks delivers the chunks; it is closed when the input ends.
	Chunks() <-chan *Chunk
	// Err says, once Chunks is closed, why the input ended: nil at the end
	// of a file or when its context ended.
	Err() error
	// Release gives a processed chunk back for reuse.
	Release(c *Chunk)
}

// OfferChunk offers every input of c at position next or later (readmitting
// those marked Readmit) and returns the position after the last one
// offered; inputs before next were offered already (a consumer delivering
// again after repositioning) and are skipped.
func (p *Processor) OfferChunk(ctx context.Context, c *Chunk, next uint64) (uint64, error) {
	for i := range c.Inputs {
		in := &c.Inputs[i]
		if in.Pos < next && !in.Readmit {
			continue
		}
		var err error
		if in.Readmit {
			err = p.ReadmitDecoded(in.Pos, in.Payload, &in.Event, in.Err)
		} else {
			err = p.OfferDecoded(ctx, in.Origin, in.Payload, &in.Event, in.Err)
			next = in.Pos + 1
		}
		if err != nil {
			return next, err
		}
	}
	return next, nil
}
