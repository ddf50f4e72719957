package eval

import (
	"context"
	"fmt"
	"testing"
	"time"

	"waymark/stream"
)

// popFillLog is issue 13's minimal case: training (2026-01-01) holds 50
// sessions "a b", one "a c", 300 "c d" and 10,000 single clicks on "p";
// the test day (2026-01-02) holds the session "a c".
func popFillLog() []stream.Event {
	t := int64(1767225600000) // 2026-01-01T00:00:00Z
	var evs []stream.Event
	n := 0
	sess := func(items ...string) {
		n++
		for _, it := range items {
			t += 1000
			evs = append(evs, stream.Event{Session: fmt.Sprintf("s%d", n), Item: it, TS: t})
		}
	}
	for range 50 {
		sess("a", "b")
	}
	sess("a", "c")
	for range 300 {
		sess("c", "d")
	}
	for range 10_000 {
		sess("p")
	}
	t = 1767312000000 // 2026-01-02T00:00:00Z
	sess("a", "c")
	return evs
}

// TestPopFillBelowEvidence: candidates with evidence come before popularity
// fills. After "a" the session's evidence is b (50 times) then c (once);
// p, never seen after anything, is only popular. The expected ranking is
// the (issue 13, finding 2): markov, sr and iknn put c second, so
// HitRate@2 is 1 for them and must be 1 for every blend that includes
// them, whatever popularity's weight.
func TestPopFillBelowEvidence(t *testing.T) {
	o := DefaultOptions()
	o.Protocol = Temporal
	o.SplitAt = time.Date(2026, 1, 2, 0, 0, 0, 0, time.UTC)
	o.Models = []string{"blend", "blend(sr=1,pop=0.1)", "blend(markov=1,pop=5)", "markov", "sr", "iknn"}
	o.K = []int{1, 2}
	rep, err := Run(context.Background(), FromEvents("popfill", popFillLog()), o)
	if err != nil {
		t.Fatal(err)
	}
	if len(rep.Models) != len(o.Models) {
		t.Fatalf("%d models, want %d", len(rep.Models), len(o.Models))
	}
	for _, m := range rep.Models {
		if m.Queries != 1 {
			t.Errorf("%s: %d queries, want 1 (a → c)", m.Name, m.Queries)
		}
		if got := m.Metrics["HitRate@2"]; got != 1 {
			t.Errorf("%s: HitRate@2 = %v, want 1 (c, with evidence after a, ranked above the popular p)", m.Name, got)
		}
		if got := m.Metrics["HitRate@1"]; got != 0 {
			t.Errorf("%s: HitRate@1 = %v, want 0 (b followed a 50 times, c once)", m.Name, got)
		}
	}
}
