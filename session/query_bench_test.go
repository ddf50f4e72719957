package session

import (
	"fmt"
	"sync"
	"testing"

	"waymark/bench/synth"
	"waymark/models"
)

// Next-item queries in process on a pipeline that learned 1M synthetic
// events over 100k items, per model and session length, with the same
// exclusion of session items as serve. bench/cmd/query runs the A B A B
// comparison with the bare baseline at 1M and 10M events; this is the
// go test form for profiling one case:
//
//	go test -run '^$' -bench 'BenchmarkRecommend/sr/5' -cpuprofile cpu.out ./session

var (
	benchOnce sync.Once
	benchPipe *Pipeline
)

func benchPipeline(b *testing.B) *Pipeline {
	benchOnce.Do(func() {
		o := DefaultPipelineOptions()
		o.Models = []string{"sr", "iknn", "markov", "vsknn", "blend"}
		p, err := NewPipeline(o)
		if err != nil {
			b.Fatal(err)
		}
		g := synth.NewGen(synth.Options{Items: 100_000, Concurrent: 1000})
		for range 1_000_000 {
			ev := g.Next()
			p.Apply(&ev)
		}
		benchPipe = p
	})
	return benchPipe
}

func BenchmarkRecommend(b *testing.B) {
	p := benchPipeline(b)
	for _, spec := range []string{"sr", "iknn", "markov", "vsknn", "blend"} {
		r, ok := p.Recommender(spec)
		if !ok {
			b.Fatalf("no recommender %q", spec)
		}
		for _, L := range []int{1, 5, 20} {
			g := synth.NewGen(synth.Options{Items: 100_000, Seed: 99, SessionPrefix: "q"})
			qs := make([][]string, 256)
			for i := range qs {
				qs[i] = make([]string, L)
				for j := range qs[i] {
					qs[i][j] = g.Next().Item
				}
			}
			b.Run(fmt.Sprintf("%s/%d", spec, L), func(b *testing.B) {
				b.ReportAllocs()
				dst := make([]models.Scored, 0, 20)
				i := 0
				for b.Loop() {
					q := p.NewQuery(qs[i%len(qs)], 0)
					skip := func(id models.ItemID) bool {
						for _, s := range q.Session {
							if s.Item == id {
								return true
							}
						}
						return false
					}
					dst = r.Recommend(&q, 20, skip, dst[:0])
					i++
				}
			})
		}
	}
}
