package eval

import (
	"context"
	"fmt"
	"math"
	"testing"
	"time"

	"waymark/stream"
)

// workedLog is the hand-computed example of the temporal split. Training
// (2026-01-01): A>B three times, A>C twice, B>C once. Test (2026-01-02):
// A>B>C and A>C>B.
func workedLog() []stream.Event {
	t := int64(1767225600000) // 2026-01-01T00:00:00Z
	var evs []stream.Event
	sess := func(name, items string, day int64) {
		for _, c := range items {
			t += 1000
			evs = append(evs, stream.Event{Session: name, Item: string(c), TS: t + day*86_400_000})
		}
	}
	for n := range 3 {
		sess(fmt.Sprintf("tr-ab%d", n), "AB", 0)
	}
	for n := range 2 {
		sess(fmt.Sprintf("tr-ac%d", n), "AC", 0)
	}
	sess("tr-bc", "BC", 0)
	sess("te-x", "ABC", 1)
	sess("te-y", "ACB", 1)
	return evs
}

// TestWorkedExample checks the temporal split with Markov alone against the
// hand computation: queries (A→B) rank 1, (AB→C) rank 1 (A is excluded as
// already in the session), (A→C) rank 2, (AC→B) no candidate, since C has
// no successor in training and Markov alone has no fallback.
func TestWorkedExample(t *testing.T) {
	o := DefaultOptions()
	o.Protocol = Temporal
	o.SplitAt = time.Date(2026, 1, 2, 0, 0, 0, 0, time.UTC)
	o.Models = []string{"markov"}
	o.K = []int{1, 20}
	rep, err := Run(context.Background(), FromEvents("worked", workedLog()), o)
	if err != nil {
		t.Fatal(err)
	}
	if len(rep.Models) != 1 {
		t.Fatalf("%d models, want 1", len(rep.Models))
	}
	m := rep.Models[0]
	want := map[string]float64{
		"HitRate@20":   0.75,
		"MRR@20":       0.625,
		"NDCG@20":      (2 + 1/math.Log2(3)) / 4,
		"HitRate@1":    0.5,
		"MRR@1":        0.5,
		"Precision@1":  0.5,
		"Recall@20":    0.75,
		"Precision@20": 3.0 / 4 / 20,
		// Markov recommended B and C (A is always excluded or absent):
		// 2 of the 3 items.
		"Coverage@20": 2.0 / 3,
	}
	for k, v := range want {
		if got, ok := m.Metrics[k]; !ok || math.Abs(got-v) > 1e-9 {
			t.Errorf("%s = %v (present %v), want %v", k, got, ok, v)
		}
	}
	if m.Queries != 4 || rep.Scoring.Queries != 4 {
		t.Errorf("queries = %d (scoring %d), want 4", m.Queries, rep.Scoring.Queries)
	}
	if m.Answered != 3 {
		t.Errorf("answered = %d, want 3 (AC has no candidate)", m.Answered)
	}
	// Positions: two queries after the first click, two after the second.
	if got := []int64{m.Positions[0].Queries, m.Positions[1].Queries}; got[0] != 2 || got[1] != 2 {
		t.Errorf("position queries = %v, want [2 2]", got)
	}
	if p := m.Positions[0].Metrics["MRR@20"]; math.Abs(p-0.75) > 1e-9 {
		t.Errorf("position 1 MRR@20 = %v, want (1+1/2)/2", p)
	}
	if rep.Scoring.TrainingClicks != 12 || rep.Scoring.FirstClicks != 2 {
		t.Errorf("scoring = %+v, want 12 training clicks and 2 first clicks", rep.Scoring)
	}
}
