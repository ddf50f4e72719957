// Command query measures next-item queries in process (issue 6, figure 3):
// the latency distribution of 1-, 5- and 20-click sessions per model, on a
// pipeline that learned N synthetic events over 100k items, against the
// bare baseline (a top-k over a plain per-item neighbour list), A B A B. It
// learns in one pass and measures at each size in --sizes, so the 1M and
// 10M figures come from the same run and their ratio shows how flat the
// query cost is.
//
//	go run ./bench/cmd/query --sizes 1000000,10000000
package main

import (
	"flag"
	"fmt"
	"os"
	"runtime"
	"runtime/pprof"
	"strconv"
	"strings"
	"time"

	"waymark/bench/abab"
	"waymark/bench/bare"
	"waymark/bench/synth"
	"waymark/models"
	"waymark/session"
)

var targets = map[string]float64{"sr": 50, "iknn": 50, "markov": 50, "vsknn": 500}

func main() {
	sizesF := flag.String("sizes", "1000000,10000000", "learned events at which to measure, comma-separated, increasing")
	items := flag.Int("items", 100_000, "catalogue size")
	modelsF := flag.String("models", "sr,iknn,markov,vsknn,blend", "model specs to query")
	lengths := flag.String("lengths", "1,5,20", "session lengths, clicks")
	n := flag.Int("queries", 4000, "queries per model, length and round")
	rounds := flag.Int("rounds", 3, "A B rounds")
	k := flag.Int("k", 20, "items per answer")
	out := flag.String("json", "", "append figures as JSON lines to `file`")
	cpu := flag.String("cpuprofile", "", "write a CPU profile of the query rounds at the last size to `file`")
	flag.Parse()
	rec, closeRec, err := abab.NewRecorder(*out, "query")
	if err != nil {
		fail(err)
	}
	defer closeRec()
	sizes := ints(*sizesF)
	lens := ints(*lengths)
	specs := strings.Split(*modelsF, ",")

	o := session.DefaultPipelineOptions()
	o.Models = specs
	p, err := session.NewPipeline(o)
	if err != nil {
		fail(err)
	}
	gen := synth.NewGen(synth.Options{Items: *items, Concurrent: 1000})
	counter := bare.NewPairCounter()
	queries := makeQueries(*items, lens, 1000)
	learned := 0
	p99 := map[string]float64{} // spec/len/size → median p99
	fmt.Printf("query: models %v, k=%d, %d queries per model, length and round, %d rounds\n", specs, *k, *n, *rounds)
	for _, size := range sizes {
		start := time.Now()
		for ; learned < size; learned++ {
			ev := gen.Next()
			p.Apply(&ev)
			counter.Add(&ev)
		}
		nb := counter.Neighbors()
		fmt.Printf("\nlearned %d events (%s), %d items, bare pairs %d\n", learned, time.Since(start).Round(time.Second), p.Dict.Len(), counter.Pairs())
		runtime.GC()
		if *cpu != "" && size == sizes[len(sizes)-1] {
			f, err := os.Create(*cpu)
			if err != nil {
				fail(err)
			}
			pprof.StartCPUProfile(f)
			defer pprof.StopCPUProfile()
		}
		for _, spec := range specs {
			r, ok := p.Recommender(spec)
			if !ok {
				fail(fmt.Errorf("no recommender %q", spec))
			}
			for _, L := range lens {
				qs := queries[L]
				var all []time.Duration
				name := fmt.Sprintf("query %s, %d-click sessions, %s events: p99 (A) vs bare top-%d p99 (B)", spec, L, abab.Fmt(float64(size)), *k)
				pair, err := abab.Run(name, "µs", *rounds,
					func(round int) (float64, error) {
						ds := timeModel(p, r, qs, *n, round, *k)
						all = append(all, ds...)
						return abab.Summarize(ds).P99, nil
					},
					func(round int) (float64, error) {
						return abab.Summarize(timeBare(nb, qs, *n, round, *k)).P99, nil
					})
				if err != nil {
					fail(err)
				}
				rec.Pair(os.Stdout, pair)
				lat := abab.Summarize(all)
				fmt.Printf("  %s all rounds: %s\n", spec, lat)
				key := fmt.Sprintf("%s/%d", spec, L)
				rec.Record(fmt.Sprintf("latency %s %d-click at %d", spec, L, size), lat)
				if t, ok := targets[spec]; ok {
					fmt.Printf("  target p99 <= %gµs: %s (median p99 %.1fµs)\n", t, abab.Verdict(pair.MedianA() <= t), pair.MedianA())
				}
				if prev, ok := p99[key]; ok {
					g := pair.MedianA() / prev
					fmt.Printf("  growth of p99 from the previous size: x%.2f (target within 2x: %s)\n", g, abab.Verdict(g <= 2))
					rec.Record("growth "+key, map[string]any{"from": prev, "to": pair.MedianA(), "ratio": g, "met": g <= 2})
				}
				p99[key] = pair.MedianA()
			}
		}
	}
}

// makeQueries returns, per length, 1000 sessions of that many clicks taken
// from a generator of the same shape with another seed (unseen sessions).
func makeQueries(items int, lens []int, per int) map[int][][]string {
	out := map[int][][]string{}
	for _, L := range lens {
		g := synth.NewGen(synth.Options{Items: items, Seed: 99 + uint64(L), SessionPrefix: "q"})
		for range per {
			s := make([]string, L)
			for i := range s {
				s[i] = g.Next().Item
			}
			out[L] = append(out[L], s)
		}
	}
	return out
}

func timeModel(p *session.Pipeline, r models.Recommender, qs [][]string, n, round, k int) []time.Duration {
	ds := make([]time.Duration, n)
	dst := make([]models.Scored, 0, k)
	for i := range ds {
		s := qs[(i+round*n)%len(qs)]
		t := time.Now()
		q := p.NewQuery(s, 0)
		skip := func(id models.ItemID) bool {
			for _, st := range q.Session {
				if st.Item == id {
					return true
				}
			}
			return false
		}
		dst = r.Recommend(&q, k, skip, dst[:0])
		ds[i] = time.Since(t)
	}
	return ds
}

func timeBare(nb *bare.Neighbors, qs [][]string, n, round, k int) []time.Duration {
	ds := make([]time.Duration, n)
	dst := make([]bare.Entry, 0, k)
	for i := range ds {
		s := qs[(i+round*n)%len(qs)]
		t := time.Now()
		dst = nb.Top(s, k, dst)
		ds[i] = time.Since(t)
	}
	return ds
}

func ints(s string) []int {
	var out []int
	for _, f := range strings.Split(s, ",") {
		v, err := strconv.Atoi(strings.TrimSpace(f))
		if err != nil {
			fail(fmt.Errorf("%q: %w", s, err))
		}
		out = append(out, v)
	}
	return out
}

func fail(err error) {
	fmt.Fprintln(os.Stderr, "query:", err)
	os.Exit(1)
}
