package session

import (
	"fmt"
	"testing"

	"waymark/stream"
)

// TestItemCapBoundsTheDictionary: once MaxItems ids exist, clicks on new
// items are counted as overflow and learn nothing, while known items keep
// learning.
func TestItemCapBoundsTheDictionary(t *testing.T) {
	o := DefaultPipelineOptions()
	o.MaxItems = 100
	p, err := NewPipeline(o)
	if err != nil {
		t.Fatal(err)
	}
	ts := int64(1767225600000)
	for i := 0; i < 1000; i++ {
		ev := stream.Event{Session: fmt.Sprintf("s%d", i%50), Item: fmt.Sprintf("random-%d", i), TS: ts + int64(i)}
		p.Apply(&ev)
	}
	cp := p.Checkpoint()
	if p.Dict.Len() != 100 || cp.Overflow != 900 || cp.Applied != 1000 {
		t.Fatalf("dictionary %d, overflow %d, applied %d; want 100, 900, 1000", p.Dict.Len(), cp.Overflow, cp.Applied)
	}
	before := p.Set.Pop().Count(0)
	ev := stream.Event{Session: "late", Item: "random-0", TS: ts + 2000}
	p.Apply(&ev)
	if p.Set.Pop().Count(0) <= before {
		t.Fatal("a known item must keep learning when the dictionary is full")
	}
}
