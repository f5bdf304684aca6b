package pipeline

import (
	"context"
	"strings"
	"testing"

	"github.com/touchledger/touchledger/internal/state"
)

// TestOfferChunk: a chunk's inputs before next are skipped (delivered
// again), the rest are offered in order and next moves past them; the
// chunk pool hands chunks back empty. Both inputs (replay, the live
// consumer) feed the processor this way.
func TestOfferChunk(t *testing.T) {
	lines := strings.Split(strings.TrimSpace(string(demoInput(t, 20, 1))), "\n")[:5]
	ctx := context.Background()
	st, err := state.Open(ctx, state.DefaultOptions(t.TempDir()))
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	p, err := New(st, testConfig(), nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	if _, err := p.Begin("chunks"); err != nil {
		t.Fatal(err)
	}
	pool := NewChunkPool(1)
	c, ok := pool.Get(ctx)
	if !ok {
		t.Fatal("no chunk")
	}
	dec := p.NewDecoder()
	for i, l := range lines {
		ev, derr := dec.Decode([]byte(l))
		c.AddCopy(Input{Origin: Origin{Pos: uint64(i + 1)}, Payload: []byte(l), Event: ev, Err: derr})
	}
	next, err := p.OfferChunk(ctx, c, 3)
	if err != nil {
		t.Fatal(err)
	}
	if next != 6 {
		t.Errorf("next = %d after positions 1-5 from 3, want 6", next)
	}
	pool.Put(c)
	if c, _ := pool.Get(ctx); len(c.Inputs) != 0 {
		t.Errorf("a chunk came back from the pool with %d inputs", len(c.Inputs))
	}
	if err := p.Finish(ctx, true); err != nil {
		t.Fatal(err)
	}
	if got := p.Counts(); got.Accepted+got.RejectedTotal()+got.Duplicate+got.Late != 3 {
		t.Errorf("counts %+v: want the 3 inputs from position 3 on, the 2 before skipped", got)
	}
}
