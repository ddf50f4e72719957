// Package bare holds the bare baselines waymark's hot paths are measured
// against: the least code that does the same job without waymark's
// guarantees. A pair counter in Go maps (learning), a top-k over a plain
// neighbour list (querying), a decode-only reader (replay) and a
// decode-and-ack consumer (bus ingest, in consumer.go).
package bare

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"os"
	"runtime"
	"strconv"
	"strings"

	"waymark/stream"
)

// PairCounter counts consecutive item pairs per session in Go maps: the
// least any transition learner must do (intern the item, remember the
// session's last item, add one to a pair). Memory grows without bound.
type PairCounter struct {
	ids   map[string]uint32
	last  map[string]uint32
	pairs map[uint64]float64
}

// NewPairCounter returns an empty counter.
func NewPairCounter() *PairCounter {
	return &PairCounter{ids: map[string]uint32{}, last: map[string]uint32{}, pairs: map[uint64]float64{}}
}

// Add counts one event.
func (c *PairCounter) Add(ev *stream.Event) {
	id, ok := c.ids[ev.Item]
	if !ok {
		id = uint32(len(c.ids))
		c.ids[ev.Item] = id
	}
	if prev, ok := c.last[ev.Session]; ok {
		c.pairs[uint64(prev)<<32|uint64(id)]++
	}
	c.last[ev.Session] = id
}

// Pairs returns the number of distinct pairs counted.
func (c *PairCounter) Pairs() int { return len(c.pairs) }

// DecodeFile reads a JSON-lines file and decodes every line with the
// project's allocation-light decoder and nothing else: no sort, no
// session bookkeeping. It returns the number of events decoded.
func DecodeFile(path string) (int, error) {
	return eachEvent(path, nil)
}

// eachEvent decodes every line of a JSON-lines file with the project's
// decoder and hands each event to f (when not nil). It returns the number
// of events decoded.
func eachEvent(path string, f func(*stream.Event)) (int, error) {
	fh, err := os.Open(path)
	if err != nil {
		return 0, err
	}
	defer fh.Close()
	r := bufio.NewReaderSize(fh, 1<<20)
	n := 0
	for {
		line, err := r.ReadSlice('\n')
		if len(line) > 1 {
			ev, derr := stream.DecodeJSON(line[:len(line)-1])
			if derr != nil {
				return n, fmt.Errorf("line %d: %w", n+1, derr)
			}
			if f != nil {
				f(&ev)
			}
			n++
		}
		if errors.Is(err, io.EOF) {
			return n, nil
		}
		if err != nil {
			return n, err
		}
	}
}

// RSS returns the process's resident set size in bytes (Linux), 0 when
// unknown.
func RSS() int64 {
	b, err := os.ReadFile("/proc/self/status")
	if err != nil {
		return 0
	}
	for _, l := range strings.Split(string(b), "\n") {
		if v, ok := strings.CutPrefix(l, "VmRSS:"); ok {
			kb, _ := strconv.ParseInt(strings.TrimSpace(strings.TrimSuffix(strings.TrimSpace(v), "kB")), 10, 64)
			return kb << 10
		}
	}
	return 0
}

// HeapInUse collects garbage twice and returns the live heap in bytes.
func HeapInUse() int64 {
	runtime.GC()
	runtime.GC()
	var ms runtime.MemStats
	runtime.ReadMemStats(&ms)
	return int64(ms.HeapAlloc)
}

// AddNoPair does Add's bookkeeping (intern, last item) without counting
// the pair, so the pairs' own memory can be told apart.
func (c *PairCounter) AddNoPair(ev *stream.Event) {
	id, ok := c.ids[ev.Item]
	if !ok {
		id = uint32(len(c.ids))
		c.ids[ev.Item] = id
	}
	c.last[ev.Session] = id
}
