package synth

import (
	"testing"

	"waymark/stream"
)

// TestAppendLineDecodes: the ~200-byte bench line decodes, through the
// project's decoder, to the event it was written from (the page-context
// fields are ignored), and has the size the benchmarks claim.
func TestAppendLineDecodes(t *testing.T) {
	g := NewGen(Options{Items: 100_000, Concurrent: 1000})
	total := 0
	for i := range 1000 {
		ev := g.Next()
		line := AppendLine(nil, &ev, uint64(i))
		total += len(line)
		got, err := stream.DecodeJSON(line)
		if err != nil {
			t.Fatalf("line %d %s: %v", i, line, err)
		}
		if got.Session != ev.Session || got.Item != ev.Item || got.TS != ev.TS || got.Kind != stream.KindView {
			t.Fatalf("line %d decoded to %+v, want %+v (kind view)", i, got, ev)
		}
	}
	if mean := total / 1000; mean < 180 || mean > 220 {
		t.Errorf("mean line %d bytes, want about 200", mean)
	}
}

// TestStreamShape: event times never go back and sessions last 2 to 12
// clicks, the shape the generator documents.
func TestStreamShape(t *testing.T) {
	evs := Generate(Options{Events: 50_000, Items: 5000, Concurrent: 100})
	lengths := map[string]int{}
	for i := range evs {
		if i > 0 && evs[i].TS <= evs[i-1].TS {
			t.Fatalf("event %d at %d, not after %d", i, evs[i].TS, evs[i-1].TS)
		}
		lengths[evs[i].Session]++
	}
	// Sessions still open at the end may be shorter; every other one
	// has 2 to 12 clicks.
	short, long := 0, 0
	for _, n := range lengths {
		if n < 2 {
			short++
		}
		if n > 12 {
			long++
		}
	}
	if long > 0 || short > 100 {
		t.Errorf("%d sessions over 12 clicks, %d under 2 (at most the 100 open at the end)", long, short)
	}
}
