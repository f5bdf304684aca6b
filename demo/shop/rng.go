package shop

import (
	"math"
	"math/bits"
)

// stream is a splitmix64 generator (Steele, Lea & Flood, "Fast splittable
// pseudorandom number generators", OOPSLA 2014 [from memory]). Each visitor gets
// one independent stream per purpose (life, decision, one per channel), seeded
// from (seed, visitor, purpose), so switching one channel off never shifts the
// numbers drawn for anything else. The algorithm is written out here so the
// output does not depend on the Go version's math/rand.
type stream struct{ s uint64 }

// purposes of the per-visitor streams; channel c uses purposeChannel+c.
const (
	purposeArrival uint64 = 1
	purposeLife    uint64 = 2
	purposeDecide  uint64 = 3
	purposeChannel uint64 = 16
)

func mix64(z uint64) uint64 {
	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9
	z = (z ^ (z >> 27)) * 0x94d049bb133111eb
	return z ^ (z >> 31)
}

func newStream(seed int64, visitor int, purpose uint64) stream {
	s := mix64(uint64(seed) ^ 0x5851f42d4c957f2d)
	s = mix64(s ^ uint64(visitor)*0x9e3779b97f4a7c15)
	s = mix64(s ^ purpose*0xd1b54a32d192ed03)
	return stream{s: s}
}

func (r *stream) next() uint64 {
	r.s += 0x9e3779b97f4a7c15
	return mix64(r.s)
}

// float returns a uniform number in [0, 1).
func (r *stream) float() float64 { return float64(r.next()>>11) * 0x1p-53 }

// intn returns a uniform integer in [0, n); n > 0.
func (r *stream) intn(n int) int {
	hi, _ := bits.Mul64(r.next(), uint64(n))
	return int(hi)
}

// between returns a uniform integer in [lo, hi]; lo <= hi.
func (r *stream) between(lo, hi int64) int64 {
	return lo + int64(r.intn(int(hi-lo+1)))
}

// extra counts successes of a trial with probability p before the first
// failure, at most max: 1+extra(p) is geometric with mean about 1/(1-p).
func (r *stream) extra(p float64, max int) int {
	k := 0
	for k < max && r.float() < p {
		k++
	}
	return k
}

// exp returns an exponential variate with the given mean.
func (r *stream) exp(mean float64) float64 { return -mean * math.Log(1-r.float()) }

// pick returns an index drawn from cumulative weights cum (last = total).
func (r *stream) pick(cum []float64) int {
	x := r.float() * cum[len(cum)-1]
	for i, c := range cum {
		if x < c {
			return i
		}
	}
	return len(cum) - 1
}
