package credit

import (
	"syscall"
	"testing"
	"time"
)

func cpuNow() time.Duration {
	var ru syscall.Rusage
	syscall.Getrusage(syscall.RUSAGE_SELF, &ru)
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

func TestDbgPhases(t *testing.T) {
	js := benchJourneys(1, 200_000, 20)
	counts, _ := benchCounts(js, 3)
	for range 5 {
		c0, w0 := cpuNow(), time.Now()
		ch, _ := buildChain(counts)
		c1, w1 := cpuNow(), time.Now()
		full := make([]float64, ch.n)
		ch.sweep(full, [][]int32{nil}, nil, 0)
		c2, w2 := cpuNow(), time.Now()
		x := make([]float64, ch.n*10)
		ch.sweep(x, ch.statesOf[:10], full, full[0])
		c3, w3 := cpuNow(), time.Now()
		ch.removalEffects(denseLimit)
		c4, w4 := cpuNow(), time.Now()
		t.Log("build cpu", c1-c0, "wall", w1.Sub(w0), "| full cpu", c2-c1, "wall", w2.Sub(w1), "| block10 cpu", c3-c2, "wall", w3.Sub(w2), "| all cpu", c4-c3, "wall", w4.Sub(w3))
	}
}
