package credit

import (
	"os"
	"runtime/pprof"
	"testing"
)

func TestDbgProfileBuild(t *testing.T) {
	js := benchJourneys(1, 200_000, 20)
	counts, _ := benchCounts(js, 3)
	f, _ := os.Create("/tmp/build.prof")
	pprof.StartCPUProfile(f)
	for range 40 {
		buildChain(counts)
	}
	pprof.StopCPUProfile()
	f.Close()
}
