package models

import (
	"math"
	"slices"
	"testing"
)

// feed teaches models sessions of item ids, every click at the same event
// time so each count weighs exactly 1 (2^0 in landmark form).
func feed(ms []Model, sessions [][]ItemID) {
	var no uint64
	for _, s := range sessions {
		no++
		var win []Step
		for _, it := range s {
			o := Observation{Window: win, Item: it, TS: 1, SessionNo: no, Weight: 1}
			o.Repeat = len(win) > 0 && win[len(win)-1].Item == it
			for _, m := range ms {
				m.Observe(&o)
			}
			if !o.Repeat {
				win = append(win, Step{Item: it, TS: 1})
			}
		}
	}
}

func query(items ...ItemID) *Query {
	q := &Query{Now: 1}
	for _, it := range items {
		q.Session = append(q.Session, Step{Item: it, TS: 1})
	}
	return q
}

// Hand-computed from the definitions in DESIGN.md (first-order counts and
// Sequential Rules with weight 1/gap).
func TestMarkovAndSRWorked(t *testing.T) {
	const a, b, c, d = 0, 1, 2, 3
	sessions := [][]ItemID{
		{a, b, c},
		{a, b, b, d}, // the repeated b counts once
		{b, a, c},
	}
	mk := NewMarkov(0)
	sr := NewSR(2, 0)
	feed([]Model{mk, sr}, sessions)
	tests := []struct {
		name string
		m    Model
		last ItemID
		want map[ItemID]float64
	}{
		{"markov a", mk, a, map[ItemID]float64{b: 2, c: 1}},
		{"markov b", mk, b, map[ItemID]float64{c: 1, d: 1, a: 1}},
		// sr(window=2): a→b 1+1, a→c 1/2 (s1) + 1 (s3), b→c 1, b→d 1, b→a 1, b→c 1/2 (s3)
		{"sr a", sr, a, map[ItemID]float64{b: 2, c: 1.5, d: 0.5}},
		{"sr b", sr, b, map[ItemID]float64{c: 1.5, d: 1, a: 1}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got := new(Scores)
			tt.m.Candidates(query(tt.last), got)
			if got.Len() != len(tt.want) {
				t.Fatalf("got %v, want %v", got.Entries(), tt.want)
			}
			for k, v := range tt.want {
				if math.Abs(got.Get(k)-v) > 1e-12 {
					t.Errorf("score of %d = %g, want %g", k, got.Get(k), v)
				}
			}
		})
	}
}

func TestTopListExact(t *testing.T) {
	var v vector
	tl := newTopList(3, v.get)
	adds := []struct {
		id ItemID
		w  float64
	}{{5, 1}, {2, 3}, {7, 2}, {9, 0.5}, {9, 3}, {5, 0.5}, {1, 10}}
	for _, a := range adds {
		v.add(a.id, a.w)
		tl.touch(a.id)
	}
	// values: 1:10, 9:3.5, 2:3, 7:2, 5:1.5
	want := []ItemID{1, 9, 2}
	if len(tl.items) != 3 {
		t.Fatalf("top = %v, want %v", tl.items, want)
	}
	for i := range want {
		if tl.items[i] != want[i] {
			t.Fatalf("top = %v, want %v", tl.items, want)
		}
	}
}

func TestPruneKeepsHeaviest(t *testing.T) {
	pt := newPairTable(2)
	for b, w := range []float64{1, 5, 3, 4, 2} {
		pt.add(0, ItemID(b), w)
	}
	// 5 entries > 2*cap=4: cut back to the 2 heaviest (ids 1 and 3).
	if pt.get(0, 1) != 5 || pt.get(0, 3) != 4 || pt.size() != 2 {
		t.Fatalf("row after prune: %+v", pt.rows[0])
	}
}

func TestParseSpec(t *testing.T) {
	tests := []struct {
		in   string
		want string
		bad  bool
	}{
		{"sr", "sr", false},
		{"sr(window=5)", "sr(window=5)", false},
		{" iknn( shrink=10 , span=2 ) ", "iknn(shrink=10,span=2)", false},
		{"sr(window)", "", true},
		{"sr(window=5", "", true},
		{"(x=1)", "", true},
		{"sr(a=1,a=2)", "", true},
	}
	for _, tt := range tests {
		sp, err := ParseSpec(tt.in)
		if tt.bad {
			if err == nil {
				t.Errorf("ParseSpec(%q) = %v, want an error", tt.in, sp)
			}
			continue
		}
		if err != nil || sp.String() != tt.want {
			t.Errorf("ParseSpec(%q) = %q, %v; want %q", tt.in, sp.String(), err, tt.want)
		}
	}
	list, err := SplitSpecs("sr(window=5,cap=10),markov, blend")
	if err != nil || len(list) != 3 || list[0] != "sr(window=5,cap=10)" {
		t.Fatalf("SplitSpecs = %q, %v", list, err)
	}
	s := NewSet(DefaultSetOptions())
	for _, bad := range []string{"nosuch", "sr(window=0)", "sr(speed=3)", "blend(blend=1)"} {
		if _, err := s.Get(bad); err == nil {
			t.Errorf("Get(%q) should fail", bad)
		}
	}
}

// TestTopListMatchesFullSort: after every growth the list equals the n
// best by a full sort (common practice: check an incremental structure
// against the plain computation).
func TestTopListMatchesFullSort(t *testing.T) {
	var v vector
	tl := newTopList(20, v.get)
	rng := uint64(1)
	for step := 0; step < 5000; step++ {
		rng = rng*6364136223846793005 + 1442695040888963407
		id := ItemID(rng>>33) % 300
		w := float64(1 + (rng>>20)%7)
		if step > 2500 {
			w *= 3 // newer clicks weigh more, as landmark weights do
		}
		v.add(id, w)
		tl.touch(id)
	}
	want := newTopList(20, v.get)
	want.rebuild(300)
	if !slices.Equal(tl.items, want.items) {
		t.Fatalf("incremental %v\nfull sort   %v", tl.items, want.items)
	}
}
