package credit

import (
	"runtime"
	"syscall"
	"testing"
	"time"
)

func threadCPU() time.Duration {
	var ru syscall.Rusage
	syscall.Getrusage(syscall.RUSAGE_SELF, &ru)
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

func TestDbgMin(t *testing.T) {
	runtime.LockOSThread()
	old := runtime.GOMAXPROCS(1)
	defer runtime.GOMAXPROCS(old)
	js := benchJourneys(1, 200_000, 20)
	for _, k := range []int{3} {
		counts, _ := benchCounts(js, k)
		ch, _ := buildChain(counts)
		best, bestW := time.Hour, time.Hour
		for range 15 {
			c0, w0 := threadCPU(), time.Now()
			ch.removalEffects(denseLimit)
			best = min(best, threadCPU()-c0)
			bestW = min(bestW, time.Since(w0))
		}
		t.Log("order", k, "min solve cpu", best, "wall", bestW)
	}
}
