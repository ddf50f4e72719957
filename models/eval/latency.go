package eval

import (
	"math/bits"
	"time"
)

// latencyHist is a log-linear histogram of durations in nanoseconds: 16
// linear sub-buckets per power of two, so a quantile is within about 6 %
// of the exact value, in a fixed 8 KB whatever the number of queries.
type latencyHist struct {
	counts [64 * 16]uint64
	n      uint64
}

func latencyBucket(ns uint64) int {
	if ns < 16 {
		return int(ns)
	}
	e := bits.Len64(ns) - 5 // ns>>e lies in 16..31
	return e*16 + int(ns>>uint(e))
}

// bucketMid returns a representative value of bucket b.
func bucketMid(b int) float64 {
	if b < 32 {
		return float64(b)
	}
	e := b/16 - 1
	m := b%16 + 16
	lo := uint64(m) << uint(e)
	return float64(lo) + float64(uint64(1)<<uint(e))/2
}

func (h *latencyHist) add(d time.Duration) {
	ns := uint64(max(d, 0))
	h.counts[latencyBucket(ns)]++
	h.n++
}

// quantile returns the q-quantile (0 < q <= 1) in milliseconds, 0 when
// empty.
func (h *latencyHist) quantile(q float64) float64 {
	if h.n == 0 {
		return 0
	}
	rank := uint64(q*float64(h.n) + 0.5)
	rank = min(max(rank, 1), h.n)
	var seen uint64
	for b, c := range h.counts {
		seen += c
		if seen >= rank {
			return bucketMid(b) / 1e6
		}
	}
	return 0
}
