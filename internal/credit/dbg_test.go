package credit

import (
	"math"
	"testing"
)

func TestDbgCols(t *testing.T) {
	js := benchJourneys(1, 200_000, 20)
	counts, _ := benchCounts(js, 3)
	ch, _ := buildChain(counts)
	ratioHoldVar = 0
	relTolVar = 1e-16
	full := make([]float64, ch.n)
	ch.sweep(full, [][]int32{nil}, nil, 0)
	ref := make([]float64, ch.n*20)
	ch.sweep(ref, ch.statesOf[:20], full, full[0])
	for _, hold := range []float64{-1, 0.02, 0.05} {
		ratioHoldVar = hold
		for _, tol := range []float64{1e-12, 1e-10} {
			relTolVar = tol
			var cs []int
			var maxErr float64
			for g := 0; g < 20; g += 4 {
				x := make([]float64, ch.n*4)
				sweepCount = 0
				ch.sweep(x, ch.statesOf[g:g+4], full, full[0])
				cs = append(cs, sweepCount)
				for j := range 4 {
					maxErr = max(maxErr, math.Abs(x[j]-ref[g+j])/full[0])
				}
			}
			t.Log("hold", hold, "tol", tol, "groups of 4", cs, "maxErr", maxErr)
		}
	}
}
