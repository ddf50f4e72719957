package session

import (
	"fmt"
	"testing"

	"waymark/bench/synth"
	"waymark/store"
)

// BenchmarkFlushVolume measures what flushes write per event, by events per
// flush: the same hot rows are rewritten by every flush that touches them,
// so fewer, larger flushes write fewer keys and bytes per event. Run with
// -benchtime 1x; each iteration learns 480k synthetic events (bench/synth,
// 100k items) and flushes into an in-memory batch.
func BenchmarkFlushVolume(b *testing.B) {
	evs := synth.Generate(synth.Options{Events: 480_000, Items: 100_000, Concurrent: 1000})
	for _, every := range []int{30_000, 60_000, 120_000, 240_000, 480_000} {
		b.Run(fmt.Sprintf("every=%d", every), func(b *testing.B) {
			b.ReportAllocs()
			var bytes, keys int
			for range b.N {
				p, err := NewPipeline(DefaultPipelineOptions())
				if err != nil {
					b.Fatal(err)
				}
				p.Tracker.Persist()
				for i := range evs {
					p.Apply(&evs[i])
					if (i+1)%every == 0 {
						batch := new(store.Batch)
						if err := p.Flush(batch, p.Checkpoint()); err != nil {
							b.Fatal(err)
						}
						bytes += batch.Bytes()
						keys += batch.Len()
					}
				}
			}
			n := float64(b.N * len(evs))
			b.ReportMetric(float64(bytes)/n, "bytes/event")
			b.ReportMetric(float64(keys)/n, "keys/event")
		})
	}
}
