package models

import (
	"math"
	"slices"
	"testing"
	"time"
)

const day = 24 * 3600 * 1000

// knnWorld stores four past sessions (numbers 1..4, items a..f = 0..5) and
// returns the index: s1 = [a b c] ended 2 days before now, s2 = [b d] 1 day
// before, s3 = [a d e] at now, s4 = [c e] at now.
func knnWorld(t *testing.T, opts SessionIndexOptions) (*SessionIndex, int64) {
	t.Helper()
	idx, err := NewSessionIndex(opts)
	if err != nil {
		t.Fatal(err)
	}
	const a, b, c, d, e = 0, 1, 2, 3, 4
	now := int64(100 * day)
	sessions := []struct {
		items []ItemID
		last  int64
	}{
		{[]ItemID{a, b, c}, now - 2*day},
		{[]ItemID{b, d}, now - day},
		{[]ItemID{a, d, e}, now},
		{[]ItemID{c, e}, now},
	}
	for i, s := range sessions {
		for j, it := range s.items {
			// earlier clicks a second apart, the last one at s.last;
			// sessions 1 and 3 are one visitor's
			ts := s.last - int64(len(s.items)-1-j)*1000
			visitor := []string{"ann", "bo", "ann", "cy"}[i]
			idx.Observe(&Observation{Item: it, TS: ts, SessionNo: uint64(i + 1), SessionHash: HashSession(visitor)})
		}
	}
	return idx, now
}

func knnModel(t *testing.T, o KNNOptions, idx *SessionIndex) *SessionKNN {
	t.Helper()
	m, err := NewSessionKNN(o, idx, nil)
	if err != nil {
		t.Fatal(err)
	}
	return m
}

// Worked by hand from the definitions on SessionKNN. The current session
// is [a b] (L = 2); sessions sharing an item with it are s1 (a, b), s2 (b)
// and s3 (a); s4 shares nothing.
func TestSessionKNNWorked(t *testing.T) {
	const a, b, c, d, e = 0, 1, 2, 3, 4
	idx, now := knnWorld(t, DefaultSessionIndexOptions())
	q := csQuery(now, 0, a, b)
	r6 := math.Sqrt(6)
	e1, e2 := math.Exp(-1), math.Exp(-2)
	// V-STAN with λspw = 1, λsnh = 1 day, λinh = 1: position weights
	// a e^-1, b 1; ages s1 2 days, s2 1 day, s3 0.
	st1 := (e1 + 1) / r6 * e2 // s1
	st2 := 1.0 / 2 * e1       // s2
	st3 := e1 / r6            // s3
	tests := []struct {
		name  string
		opts  KNNOptions
		sims  []NeighborSession
		votes map[ItemID]float64
	}{
		{
			// SKNN: sim = |s∩n| / sqrt(L·|n|): s1 2/√6, s2 1/√4, s3 1/√6.
			// K = 2 keeps s1 and s2. b is the last item: never a candidate.
			name:  "sknn k=2",
			opts:  KNNOptions{Variant: SKNN, K: 2, M: 500},
			sims:  []NeighborSession{{1, 2 / r6}, {2, 0.5}},
			votes: map[ItemID]float64{a: 2 / r6, c: 2 / r6, d: 0.5},
		},
		{
			name:  "sknn k=3",
			opts:  KNNOptions{Variant: SKNN, K: 3, M: 500},
			sims:  []NeighborSession{{1, 2 / r6}, {2, 0.5}, {3, 1 / r6}},
			votes: map[ItemID]float64{a: 3 / r6, c: 2 / r6, d: 0.5 + 1/r6, e: 1 / r6},
		},
		{
			// M = 2 samples the two most recent candidates, s3 and s2.
			name:  "sknn m=2",
			opts:  KNNOptions{Variant: SKNN, K: 2, M: 2},
			sims:  []NeighborSession{{2, 0.5}, {3, 1 / r6}},
			votes: map[ItemID]float64{a: 1 / r6, d: 0.5 + 1/r6, e: 1 / r6},
		},
		{
			// V-SKNN: weights a 1/2, b 1: s1 1.5/√6, s2 1/2, s3 0.5/√6.
			name:  "vsknn",
			opts:  KNNOptions{Variant: VSKNN, K: 3, M: 500},
			sims:  []NeighborSession{{1, 1.5 / r6}, {2, 0.5}, {3, 0.5 / r6}},
			votes: map[ItemID]float64{a: 2 / r6, c: 1.5 / r6, d: 0.5 + 0.5/r6, e: 0.5 / r6},
		},
		{
			// V-STAN: sims times e^-age; item votes times e^-distance to
			// the shared item: in s1 and s2 that is b (the most recent
			// shared), in s3 it is a.
			name: "vstan",
			opts: KNNOptions{Variant: VSTAN, K: 3, M: 500, SPW: 1, SNH: 1, INH: 1},
			sims: []NeighborSession{{2, st2}, {3, st3}, {1, st1}},
			votes: map[ItemID]float64{
				a: st1*e1 + st3, // s1: a one step from b; s3: a is the shared item
				c: st1 * e1,
				d: st2*e1 + st3*e1,
				e: st3 * e2,
			},
		},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			m := knnModel(t, tt.opts, idx)
			got := m.Neighbors(q)
			if len(got) != len(tt.sims) {
				t.Fatalf("neighbours %v, want %v", got, tt.sims)
			}
			for i := range got {
				if got[i].SessionNo != tt.sims[i].SessionNo || math.Abs(got[i].Sim-tt.sims[i].Sim) > 1e-12 {
					t.Errorf("neighbour %d = %+v, want %+v", i, got[i], tt.sims[i])
				}
			}
			out := new(Scores)
			m.Candidates(q, out)
			if out.Len() != len(tt.votes) {
				t.Errorf("candidates %v, want %v", out.Entries(), tt.votes)
			}
			for it, want := range tt.votes {
				if math.Abs(out.Get(it)-want) > 1e-12 {
					t.Errorf("score of item %d = %.15g, want %.15g", it, out.Get(it), want)
				}
			}
			items := []ItemID{a, b, c, d, e, 5}
			sc := make([]float64, len(items))
			m.ScoreItems(q, items, sc)
			for i, it := range items {
				if math.Abs(sc[i]-tt.votes[it]) > 1e-12 {
					t.Errorf("ScoreItems(%d) = %g, want %g", it, sc[i], tt.votes[it])
				}
			}
		})
	}
}

// IDF weighting, by hand: with s5 = [b f] stored too, N = 5, df(a) = 2,
// df(b) = 3, so idf(a) = ln(6/3)+1 and idf(b) = ln(6/4)+1, and SKNN's
// similarity of s1 = [a b c] to [a b] is (idf(a)+idf(b))/√6.
func TestSessionKNNIDF(t *testing.T) {
	const a, b, f = 0, 1, 5
	idx, now := knnWorld(t, DefaultSessionIndexOptions())
	idx.Observe(&Observation{Item: b, TS: now, SessionNo: 5})
	idx.Observe(&Observation{Item: f, TS: now, SessionNo: 5})
	m := knnModel(t, KNNOptions{Variant: SKNN, K: 10, M: 500, IDF: true}, idx)
	ia, ib := math.Log(2)+1, math.Log(1.5)+1
	want := map[uint64]float64{1: (ia + ib) / math.Sqrt(6), 2: ib / 2, 3: ia / math.Sqrt(6), 5: ib / 2}
	got := m.Neighbors(csQuery(now, 0, a, b))
	if len(got) != len(want) {
		t.Fatalf("neighbours %v, want %v", got, want)
	}
	for _, n := range got {
		if math.Abs(n.Sim-want[n.SessionNo]) > 1e-12 {
			t.Errorf("sim of session %d = %.15g, want %.15g", n.SessionNo, n.Sim, want[n.SessionNo])
		}
	}
}

// The index's bounds: the query's own session is skipped, posting lists
// keep the newest sessions, and eviction by count and by age drops the
// oldest sessions everywhere.
func TestSessionIndexBounds(t *testing.T) {
	const a, b = 0, 1
	sims := func(m *SessionKNN, q *Query) []uint64 {
		var out []uint64
		for _, n := range m.Neighbors(q) {
			out = append(out, n.SessionNo)
		}
		slices.Sort(out)
		return out
	}
	tests := []struct {
		name string
		opts SessionIndexOptions
		no   uint64 // the query's own session
		want []uint64
		held int
	}{
		{"all", DefaultSessionIndexOptions(), 0, []uint64{1, 2, 3}, 4},
		{"own session skipped", DefaultSessionIndexOptions(), 1, []uint64{2, 3}, 4},
		{"postings=1 keeps the newest per item", SessionIndexOptions{Postings: 1}, 0, []uint64{2, 3}, 4},
		{"cap of 2 sessions", SessionIndexOptions{MaxSessions: 2}, 0, []uint64{3}, 2},
		{"retention of 1.5 days", SessionIndexOptions{Retention: 36 * time.Hour}, 0, []uint64{2, 3}, 3},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			idx, now := knnWorld(t, tt.opts)
			if idx.Len() != tt.held {
				t.Errorf("holds %d sessions, want %d", idx.Len(), tt.held)
			}
			m := knnModel(t, DefaultKNNOptions(SKNN), idx)
			if got := sims(m, csQuery(now, tt.no, a, b)); !slices.Equal(got, tt.want) {
				t.Errorf("neighbours %v, want %v", got, tt.want)
			}
			// What a restart rebuilds answers the same.
			kv := newMemKV()
			idx.SetPrefix("x/")
			if err := idx.Flush(kv); err != nil {
				t.Fatal(err)
			}
			re, _ := NewSessionIndex(idx.Options())
			re.SetPrefix("x/")
			if err := kv.scan("x/", re.Load); err != nil {
				t.Fatal(err)
			}
			m2 := knnModel(t, DefaultKNNOptions(SKNN), re)
			if got := sims(m2, csQuery(now, tt.no, a, b)); !slices.Equal(got, tt.want) {
				t.Errorf("after Load neighbours %v, want %v", got, tt.want)
			}
			for no := uint64(1); no <= 4; no++ {
				x, _, ok1 := idx.Session(no)
				y, _, ok2 := re.Session(no)
				if ok1 != ok2 || !slices.Equal(x, y) {
					t.Errorf("session %d: %v %v after Load, want %v %v", no, y, ok2, x, ok1)
				}
			}
		})
	}
}

// Eviction deletes what it drops from the store, and a flush writes only
// the sessions that changed.
func TestSessionIndexFlushVolume(t *testing.T) {
	idx, err := NewSessionIndex(SessionIndexOptions{MaxSessions: 3})
	if err != nil {
		t.Fatal(err)
	}
	idx.SetPrefix("x/")
	kv := newMemKV()
	for no := uint64(1); no <= 3; no++ {
		idx.Observe(&Observation{Item: ItemID(no), TS: int64(no), SessionNo: no})
	}
	if err := idx.Flush(kv); err != nil {
		t.Fatal(err)
	}
	kv.sets, kv.dels = 0, 0
	idx.Observe(&Observation{Item: 9, TS: 10, SessionNo: 4}) // evicts session 1
	idx.Observe(&Observation{Item: 8, TS: 11, SessionNo: 3})
	if err := idx.Flush(kv); err != nil {
		t.Fatal(err)
	}
	// meta, session 3 and session 4 written; session 1 deleted
	if kv.sets != 3 || kv.dels != 1 {
		t.Errorf("flush wrote %d and deleted %d entries, want 3 and 1", kv.sets, kv.dels)
	}
	if _, ok := kv.m[string(idx.sessKey(1))]; ok {
		t.Error("evicted session 1 still stored")
	}
	if idx.DF(1) != 0 || len(idx.postings(1)) != 0 {
		t.Errorf("evicted session 1 still indexed: df %d, postings %v", idx.DF(1), idx.postings(1))
	}
}

// Forgetting a visitor removes every stored session of theirs from the
// answers, the posting lists and the store.
func TestSessionIndexForget(t *testing.T) {
	const a, b = 0, 1
	idx, now := knnWorld(t, DefaultSessionIndexOptions())
	idx.SetPrefix("x/")
	kv := newMemKV()
	if err := idx.Flush(kv); err != nil {
		t.Fatal(err)
	}
	idx.ForgetSession(HashSession("ann")) // sessions 1 and 3
	idx.ForgetSession(HashSession("nobody"))
	if idx.Len() != 2 {
		t.Errorf("holds %d sessions, want 2", idx.Len())
	}
	m := knnModel(t, DefaultKNNOptions(SKNN), idx)
	if got := m.Neighbors(csQuery(now, 0, a, b)); len(got) != 1 || got[0].SessionNo != 2 {
		t.Errorf("neighbours %v, want session 2 alone", got)
	}
	if idx.DF(a) != 0 || len(idx.postings(a)) != 0 {
		t.Errorf("item a still indexed: df %d postings %v", idx.DF(a), idx.postings(a))
	}
	kv.sets, kv.dels = 0, 0
	if err := idx.Flush(kv); err != nil {
		t.Fatal(err)
	}
	if kv.dels != 2 {
		t.Errorf("flush deleted %d sessions, want 2", kv.dels)
	}
	re, _ := NewSessionIndex(idx.Options())
	re.SetPrefix("x/")
	if err := kv.scan("x/", re.Load); err != nil {
		t.Fatal(err)
	}
	if re.Len() != 2 {
		t.Errorf("after Load holds %d sessions, want 2", re.Len())
	}
	for no := uint64(1); no <= 4; no++ {
		_, _, ok := re.Session(no)
		if want := no == 2 || no == 4; ok != want {
			t.Errorf("after Load session %d held: %v", no, ok)
		}
	}
}
