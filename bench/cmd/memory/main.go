// Command memory measures memory per stored neighbour pair and per tracked
// session (issue 6, figure 6) from the Go heap after collection: the
// heap of a pipeline holding one pair model minus that of a pipeline
// without it, learned from the same events, divided by the pairs it
// holds; and the heap of a tracker holding N sessions of 20 items, divided
// by N. Each figure is set beside the bare alternative's (a Go map of pair
// counts; a Go map of session id to item slice), measured the same way, A
// B A B.
//
//	go run ./bench/cmd/memory --events 1000000 --sessions 200000
package main

import (
	"flag"
	"fmt"
	"os"
	"runtime"
	"runtime/pprof"
	"strconv"
	"strings"

	"waymark/bench/abab"
	"waymark/bench/bare"
	"waymark/bench/synth"
	"waymark/models"
	"waymark/session"
)

func main() {
	events := flag.Int("events", 1_000_000, "events learned for the pair figures")
	items := flag.Int("items", 100_000, "catalogue size")
	sessions := flag.Int("sessions", 200_000, "sessions for the per-session figure")
	rounds := flag.Int("rounds", 3, "A B rounds")
	heap := flag.String("heapprofile", "", "write a heap profile of a learned iknn pipeline to `file`")
	out := flag.String("json", "", "append figures as JSON lines to `file`")
	flag.Parse()
	rec, closeRec, err := abab.NewRecorder(*out, "memory")
	if err != nil {
		fail(err)
	}
	defer closeRec()
	evs := synth.Generate(synth.Options{Events: *events, Items: *items, Concurrent: 1000})
	fmt.Printf("memory: pairs from %d events over %d items; %d sessions of 20 items\n", len(evs), *items, *sessions)

	learn := func(spec string) (*session.Pipeline, int64) {
		o := session.DefaultPipelineOptions()
		o.Models = []string{spec}
		// Pairs as serve's default blend keeps them: a single-model
		// pipeline would also keep ranked lists of long rows (up to 16 B a
		// pair more), which the blend never uses.
		o.WalkRows = true
		p, err := session.NewPipeline(o)
		if err != nil {
			fail(err)
		}
		before := bare.HeapInUse()
		for i := range evs {
			p.Apply(&evs[i])
		}
		after := bare.HeapInUse()
		runtime.KeepAlive(p) // inlined, p would be dead before the second GC
		return p, after - before
	}
	_, popHeap := learn("pop") // dictionary, tracker, popularity, catalogue
	barePairs := func(int) (float64, error) {
		before := bare.HeapInUse()
		c := bare.NewPairCounter()
		for i := range evs {
			c.Add(&evs[i])
		}
		after := bare.HeapInUse()
		// The bare counter's id and last-item maps are its dictionary
		// and tracker; the pairs map is what a pair costs.
		c2 := bare.NewPairCounter()
		before2 := bare.HeapInUse()
		for i := range evs {
			c2.AddNoPair(&evs[i])
		}
		after2 := bare.HeapInUse()
		runtime.KeepAlive(c)
		runtime.KeepAlive(c2)
		return float64((after-before)-(after2-before2)) / float64(c.Pairs()), nil
	}
	for _, spec := range []string{"markov", "iknn"} {
		pair, err := abab.Run("memory: bytes per stored "+spec+" pair (A) vs bare Go map[uint64]float64 pair (B)", "B/pair", *rounds,
			func(int) (float64, error) {
				p, h := learn(spec)
				m, _ := p.Set.Get(spec)
				n := pairsOf(m)
				fmt.Fprintf(os.Stderr, "    %s: %d pairs, heap %d MB above the pop-only pipeline's %d MB\n", spec, n, (h-popHeap)>>20, popHeap>>20)
				if spec == "iknn" && *heap != "" {
					writeHeap(*heap)
					*heap = ""
				}
				runtime.KeepAlive(p)
				return float64(h-popHeap) / float64(n), nil
			}, barePairs)
		if err != nil {
			fail(err)
		}
		rec.Pair(os.Stdout, pair)
		fmt.Printf("  target <= 32 B per pair: %s (median %.1f B)\n", abab.Verdict(pair.MedianA() <= 32), pair.MedianA())
		rec.Record("target pair "+spec, map[string]any{"median": pair.MedianA(), "target": 32, "met": pair.MedianA() <= 32})
	}

	// Sessions: distinct ids shaped like the synthetic ones, 20 items each.
	keys := make([]string, *sessions)
	for i := range keys {
		keys[i] = "v" + strconv.Itoa(1_000_000+i)
	}
	sess, err := abab.Run("memory: bytes per tracked session of 20 items (A) vs bare map[string][]uint32 (B)", "B/session", *rounds,
		func(int) (float64, error) {
			before := bare.HeapInUse()
			tr, err := session.NewTracker(session.DefaultTrackerOptions())
			if err != nil {
				return 0, err
			}
			var touch uint64
			no := uint64(0)
			next := func() uint64 { no++; return no }
			buf := make([]models.Step, 0, 32)
			ts := int64(1767225600000)
			for step := range 20 {
				for i, k := range keys {
					if step == 0 {
						k = strings.Clone(k) // the tracker keeps the id it first saw
					}
					touch++
					c := tr.Observe(k, models.ItemID(i*31+step), ts, touch, next, buf)
					buf = c.Window[:0]
				}
				ts += 1000
			}
			after := bare.HeapInUse()
			if tr.Len() != len(keys) {
				return 0, fmt.Errorf("tracker holds %d sessions, want %d", tr.Len(), len(keys))
			}
			runtime.KeepAlive(tr)
			return float64(after-before) / float64(len(keys)), nil
		},
		func(int) (float64, error) {
			before := bare.HeapInUse()
			m := map[string][]uint32{}
			for step := range 20 {
				for i, k := range keys {
					if step == 0 {
						k = strings.Clone(k)
					}
					m[k] = append(m[k], uint32(i*31+step))
				}
			}
			after := bare.HeapInUse()
			runtime.KeepAlive(m)
			return float64(after-before) / float64(len(keys)), nil
		})
	if err != nil {
		fail(err)
	}
	rec.Pair(os.Stdout, sess)
	fmt.Printf("  target <= 512 B per session of 20 items: %s (median %.0f B)\n", abab.Verdict(sess.MedianA() <= 512), sess.MedianA())
	rec.Record("target session", map[string]any{"median": sess.MedianA(), "target": 512, "met": sess.MedianA() <= 512})
}

func pairsOf(m models.Model) int {
	switch v := m.(type) {
	case *models.Markov:
		return v.Pairs()
	case *models.IKNN:
		return v.Pairs()
	}
	fail(fmt.Errorf("%T has no pair count", m))
	return 0
}

func writeHeap(path string) {
	f, err := os.Create(path)
	if err != nil {
		fail(err)
	}
	defer f.Close()
	runtime.GC()
	if err := pprof.WriteHeapProfile(f); err != nil {
		fail(err)
	}
}

func fail(err error) {
	fmt.Fprintln(os.Stderr, "memory:", err)
	os.Exit(1)
}
