package session

import (
	"testing"

	"waymark/bench/synth"
	"waymark/models"
)

// BenchmarkPipelineApply measures learning in process (no bus, no disk):
// tracker and every core model, per event.
func BenchmarkPipelineApply(b *testing.B) {
	evs := synth.Generate(synth.Options{Events: 1_000_000, Items: 100_000, Concurrent: 1000})
	p, err := NewPipeline(DefaultPipelineOptions())
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		ev := evs[i%len(evs)]
		ev.TS += int64(i/len(evs)) * 3_600_000
		p.Apply(&ev)
	}
}

// BenchmarkBarePairCount is the bare baseline: consecutive-pair counting in
// one Go map, the least any transition learner must do.
func BenchmarkBarePairCount(b *testing.B) {
	evs := synth.Generate(synth.Options{Events: 1_000_000, Items: 100_000, Concurrent: 1000})
	ids := map[string]uint32{}
	last := map[string]uint32{}
	pairs := map[uint64]float64{}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		ev := &evs[i%len(evs)]
		id, ok := ids[ev.Item]
		if !ok {
			id = uint32(len(ids))
			ids[ev.Item] = id
		}
		if prev, ok := last[ev.Session]; ok {
			pairs[uint64(prev)<<32|uint64(id)]++
		}
		last[ev.Session] = id
	}
}

var _ = models.DefaultHalfLife
