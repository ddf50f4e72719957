package bare

import (
	"math"
	"os"
	"path/filepath"
	"testing"

	"waymark/stream"
)

// TestPrequentialSR works two sessions by hand from the definition of
// prequential evaluation (rank before learning; HitRate@K is the share of
// asked clicks in the top K, MRR@K the mean of 1/rank, 0 outside: common
// practice) and of sr's 1/gap rules.
//
//	s1: a b c  asks b (no rules from a yet: miss) and c (miss); learns a→b 1, b→c 1, a→c 0.5
//	s2: a c b  asks c after a: rules from a are b 1, c 0.5, so c is 2nd (RR 1/2);
//	           learns a→c +1 (1.5); asks b after c: c has no rules, miss;
//	           learns c→b 1, a→b +0.5 (1.5)
//	s3: a b    asks b after a: a→b and a→c tie at 1.5, the lower id (b) first,
//	           so b is 1st (RR 1)
//
// K=20: 2 hits of 5 asked, MRR (1/2 + 1)/5; K=1: only s3's b, MRR 1/5.
func TestPrequentialSR(t *testing.T) {
	clicks := [][2]string{{"s1", "a"}, {"s1", "b"}, {"s1", "c"}, {"s2", "a"}, {"s2", "c"}, {"s2", "b"}, {"s3", "a"}, {"s3", "b"}}
	cases := []struct {
		k       int
		asked   int
		hits    int
		hitRate float64
		mrr     float64
	}{
		{k: 20, asked: 5, hits: 2, hitRate: 2.0 / 5, mrr: (0.5 + 1) / 5},
		{k: 1, asked: 5, hits: 1, hitRate: 1.0 / 5, mrr: 1.0 / 5},
	}
	for _, tc := range cases {
		p := NewPrequentialSR(tc.k)
		for _, c := range clicks {
			p.Add(&stream.Event{Session: c[0], Item: c[1]})
		}
		if p.Asked != tc.asked || p.Hits != tc.hits || math.Abs(p.HitRate()-tc.hitRate) > 1e-12 || math.Abs(p.MRR()-tc.mrr) > 1e-12 {
			t.Errorf("K=%d: asked %d hits %d HitRate %v MRR %v, want %d %d %v %v", tc.k, p.Asked, p.Hits, p.HitRate(), p.MRR(), tc.asked, tc.hits, tc.hitRate, tc.mrr)
		}
	}
}

// TestPrequentialFile checks that the file reader decodes every line and
// feeds the evaluation: the same clicks as JSON lines give the same figures.
func TestPrequentialFile(t *testing.T) {
	path := filepath.Join(t.TempDir(), "e.jsonl")
	lines := `{"session":"s1","item":"a","ts":1}
{"session":"s1","item":"b","ts":2}
{"session":"s2","item":"a","ts":3}
{"session":"s2","item":"b","ts":4}
`
	if err := os.WriteFile(path, []byte(lines), 0o600); err != nil {
		t.Fatal(err)
	}
	p, n, err := PrequentialFile(path, 20)
	if err != nil {
		t.Fatal(err)
	}
	// s2's b follows a, and a→b was learned from s1: a hit at rank 1.
	if n != 4 || p.Asked != 2 || p.Hits != 1 || p.MRR() != 0.5 {
		t.Errorf("n %d asked %d hits %d MRR %v, want 4 2 1 0.5", n, p.Asked, p.Hits, p.MRR())
	}
}
