package models

import (
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
	"sync"
)

// KNNVariant selects the session-kNN method.
type KNNVariant uint8

const (
	// SKNN weighs every item of the current session alike.
	SKNN KNNVariant = iota
	// VSKNN weighs the current session by position: the last item 1,
	// earlier ones linearly less (p/L for position p of L).
	VSKNN
	// VSTAN adds STAN's three decays: by position in the current session
	// (lambda_spw), by age of the neighbour session (lambda_snh) and by
	// distance, inside the neighbour, to the item it shares with the
	// current session (lambda_inh).
	VSTAN
)

// String returns the variant's spec name.
func (v KNNVariant) String() string {
	switch v {
	case SKNN:
		return "sknn"
	case VSKNN:
		return "vsknn"
	case VSTAN:
		return "vstan"
	}
	return "knn(" + strconv.Itoa(int(v)) + ")"
}

// KNNOptions configure a session-kNN model.
type KNNOptions struct {
	Variant KNNVariant
	// K is the number of neighbour sessions that vote (default 100).
	K int
	// M is how many of the most recent sessions sharing an item with the
	// current session are considered as neighbours (default 500).
	M int
	// IDF weighs each shared item by its inverse document frequency over
	// the stored sessions, so rare shared items say more
	// (default off for sknn and vsknn, on for vstan).
	IDF bool
	// SPW is lambda_spw, in positions: the current session's item p of L
	// weighs exp(-(L-p)/SPW) (vstan; default 2).
	SPW float64
	// SNH is lambda_snh, in days: a neighbour whose last click is a days
	// older than the query weighs exp(-a/SNH) (vstan; default 7; 0 turns
	// it off).
	SNH float64
	// INH is lambda_inh, in positions: an item d positions away, inside the
	// neighbour, from the item the neighbour shares with the current
	// session's most recent shared item gets exp(-d/INH) of the
	// neighbour's vote (vstan; default 2).
	INH float64
}

// DefaultKNNOptions returns the defaults of a variant. The published
// methods tune K, M and the three lambdas per dataset; these are starting
// points (chosen here: replay decides).
func DefaultKNNOptions(v KNNVariant) KNNOptions {
	return KNNOptions{Variant: v, K: 100, M: 500, IDF: v == VSTAN, SPW: 2, SNH: 7, INH: 2}
}

func (o *KNNOptions) validate() error {
	switch {
	case o.Variant > VSTAN:
		return fmt.Errorf("%w: session-kNN variant %d", ErrBadSpec, o.Variant)
	case o.K < 1:
		return fmt.Errorf("%w: %s: K %d below 1", ErrBadSpec, o.Variant, o.K)
	case o.M < o.K:
		return fmt.Errorf("%w: %s: M %d below K %d", ErrBadSpec, o.Variant, o.M, o.K)
	case o.Variant == VSTAN && (o.SPW <= 0 || o.INH <= 0 || o.SNH < 0):
		return fmt.Errorf("%w: vstan: lambda_spw and lambda_inh must be > 0, lambda_snh >= 0", ErrBadSpec)
	}
	return nil
}

// SessionKNN recommends from similar past sessions (SKNN, V-SKNN, V-STAN).
//
// The current session s, with its L distinct items (each at the position of
// its latest click), is a vector v_s: v_s(i) = pw(p_i) · idf(i), where the
// position weight pw is 1 (SKNN), p/L (V-SKNN) or exp(-(L-p)/λspw)
// (V-STAN), and idf(i) = ln((1+N)/(1+df_i)) + 1 over the N stored sessions
// (1 when IDF is off). A past session n is a set of items, and
//
//	sim(s, n) = Σ_{i ∈ s∩n} v_s(i) / sqrt(L · |n|)
//
// which is the cosine of the two sets for SKNN; the same set-size
// denominator serves all three variants here. V-STAN multiplies sim by
// exp(-age/λsnh), age the time from n's last click to the query. The
// candidate neighbours are the M most recent stored sessions that share an
// item with s (the query's own session is skipped); the K most similar of
// them vote: item j of n gets sim(s, n), times exp(-|pos_n(j) - pos_n(r)|/λinh)
// for V-STAN, r being the most recent item of s that n holds. The session's
// last item is never a candidate (the next click is another item: repeats
// collapse), nor is an unavailable one.
//
// The methods: SKNN and V-SKNN as compared in Ludewig and Jannach,
// "Evaluation of session-based recommendation algorithms" (UMUAI 2018);
// STAN from Garg et al., "Sequence and Time Aware Neighborhood for
// Session-based Recommendations" (SIGIR 2019); V-STAN, STAN with V-SKNN's
// idf weighting, from Ludewig et al., "Empirical analysis of session-based
// recommendation algorithms" (UMUAI 2021). The formulas above are this
// package's reading of them and what its tests check.
type SessionKNN struct {
	opts    KNNOptions
	idx     *SessionIndex
	cat     *Catalog
	scratch sync.Pool // *knnScratch: queries run concurrently
}

// NewSessionKNN returns a model over the sessions of idx, filtering
// through cat (nil: everything is available).
func NewSessionKNN(opts KNNOptions, idx *SessionIndex, cat *Catalog) (*SessionKNN, error) {
	if err := opts.validate(); err != nil {
		return nil, err
	}
	m := &SessionKNN{opts: opts, idx: idx, cat: cat}
	m.scratch.New = func() any { return new(knnScratch) }
	return m, nil
}

func (m *SessionKNN) Name() string {
	d := DefaultKNNOptions(m.opts.Variant)
	var ps []string
	if m.opts.K != d.K {
		ps = append(ps, "k="+strconv.Itoa(m.opts.K))
	}
	if m.opts.M != d.M {
		ps = append(ps, "m="+strconv.Itoa(m.opts.M))
	}
	if m.opts.IDF != d.IDF {
		ps = append(ps, "idf="+strconv.Itoa(b2i(m.opts.IDF)))
	}
	if m.opts.Variant == VSTAN {
		ps = append(ps, "lambda_inh="+ftoa(m.opts.INH), "lambda_snh="+ftoa(m.opts.SNH), "lambda_spw="+ftoa(m.opts.SPW))
	}
	name := m.opts.Variant.String()
	if len(ps) > 0 {
		name += "(" + strings.Join(ps, ",") + ")"
	}
	return name
}

func b2i(b bool) int {
	if b {
		return 1
	}
	return 0
}

func ftoa(f float64) string { return strconv.FormatFloat(f, 'g', -1, 64) }

// Options returns the effective options.
func (m *SessionKNN) Options() KNNOptions { return m.opts }

// Observe does nothing: the shared [SessionIndex] learns the sessions.
func (m *SessionKNN) Observe(*Observation) {}

// knnScratch is one query's working memory, reused across queries.
type knnScratch struct {
	qitems []qItem
	lists  [][]uint64
	curs   []int
	cands  []knnCand
	votes  Scores
}

type qItem struct {
	item ItemID
	pos  int // 1..L, by latest click
	w    float64
}

type knnCand struct {
	no  uint64
	sim float64 // the dot product until scored
	ref int     // highest query position shared
}

// better orders neighbours: higher similarity, then the more recent
// session.
func (a *knnCand) better(b *knnCand) bool {
	return a.sim > b.sim || (a.sim == b.sim && a.no > b.no)
}

// Candidates adds the neighbours' votes.
func (m *SessionKNN) Candidates(q *Query, out *Scores) {
	sc := m.scratch.Get().(*knnScratch)
	defer m.scratch.Put(sc)
	m.vote(q, sc, func(j ItemID, v float64) { out.Add(j, v) })
}

// ScoreItems writes each item's vote.
func (m *SessionKNN) ScoreItems(q *Query, items []ItemID, out []float64) {
	clear(out)
	sc := m.scratch.Get().(*knnScratch)
	defer m.scratch.Put(sc)
	sc.votes.Reset()
	m.vote(q, sc, func(j ItemID, v float64) { sc.votes.Add(j, v) })
	for i, id := range items {
		out[i] = sc.votes.Get(id)
	}
}

// Neighbors returns the K neighbour sessions of q with their similarity,
// most similar first, for inspection and tests.
func (m *SessionKNN) Neighbors(q *Query) []NeighborSession {
	sc := new(knnScratch)
	m.neighbors(q, sc)
	out := make([]NeighborSession, len(sc.cands))
	for i, c := range sc.cands {
		out[i] = NeighborSession{SessionNo: c.no, Sim: c.sim}
	}
	return out
}

// NeighborSession is a past session and its similarity to a query.
type NeighborSession struct {
	SessionNo uint64
	Sim       float64
}

// queryItems fills sc.qitems with the distinct items of q, each at the
// position of its latest click, and their weights.
func (m *SessionKNN) queryItems(q *Query, sc *knnScratch) {
	sc.qitems = sc.qitems[:0]
	for i := len(q.Session) - 1; i >= 0; i-- {
		it := q.Session[i].Item
		dup := false
		for _, qi := range sc.qitems {
			if qi.item == it {
				dup = true
				break
			}
		}
		if !dup {
			sc.qitems = append(sc.qitems, qItem{item: it})
		}
	}
	slices.Reverse(sc.qitems) // oldest first
	L := len(sc.qitems)
	n := float64(m.idx.Len())
	for i := range sc.qitems {
		qi := &sc.qitems[i]
		qi.pos = i + 1
		switch m.opts.Variant {
		case SKNN:
			qi.w = 1
		case VSKNN:
			qi.w = float64(qi.pos) / float64(L)
		case VSTAN:
			qi.w = math.Exp(-float64(L-qi.pos) / m.opts.SPW)
		}
		if m.opts.IDF {
			qi.w *= math.Log((1+n)/(1+float64(m.idx.DF(qi.item)))) + 1
		}
	}
}

// neighbors leaves the K most similar candidate sessions in sc.cands, most
// similar first (ties: the more recent session first).
func (m *SessionKNN) neighbors(q *Query, sc *knnScratch) {
	m.queryItems(q, sc)
	sc.cands = sc.cands[:0]
	L := len(sc.qitems)
	if L == 0 {
		return
	}
	// Merge the items' posting lists from their newest end: every list is
	// ascending, so taking the largest head each time visits sessions from
	// the most recent down, and all lists holding one session yield it
	// together, which gives its overlap without reading its items.
	sc.curs, sc.lists = sc.curs[:0], sc.lists[:0]
	for _, qi := range sc.qitems {
		l := m.idx.postings(qi.item)
		sc.lists = append(sc.lists, l)
		sc.curs = append(sc.curs, len(l)-1)
	}
	lists := sc.lists
	for len(sc.cands) < m.opts.M {
		best := uint64(0)
		found := false
		for i, c := range sc.curs {
			if c >= 0 && (!found || lists[i][c] > best) {
				best, found = lists[i][c], true
			}
		}
		if !found {
			break
		}
		cand := knnCand{no: best}
		for i, c := range sc.curs {
			if c >= 0 && lists[i][c] == best {
				cand.sim += sc.qitems[i].w
				cand.ref = max(cand.ref, sc.qitems[i].pos)
				sc.curs[i]--
			}
		}
		if best == q.SessionNo && q.SessionNo != 0 {
			continue
		}
		sc.cands = append(sc.cands, cand)
	}
	snh := m.opts.SNH * 24 * 3600 * 1000
	for i := range sc.cands {
		c := &sc.cands[i]
		r := m.idx.session(c.no)
		c.sim /= math.Sqrt(float64(L) * float64(len(r.items)))
		if m.opts.Variant == VSTAN && snh > 0 {
			age := max(float64(q.Now-r.last), 0)
			c.sim *= math.Exp(-age / snh)
		}
	}
	topKCands(sc.cands, m.opts.K)
	if len(sc.cands) > m.opts.K {
		sc.cands = sc.cands[:m.opts.K]
	}
}

// topKCands moves the k best candidates to the front of cs, best first:
// a min-heap of the k best so far, then a sort of those k (M is usually
// several times K, so this beats sorting all of cs).
func topKCands(cs []knnCand, k int) {
	if k > len(cs) {
		k = len(cs)
	}
	h := cs[:k]
	// heapify: the worst of the kept at h[0]
	for i := k/2 - 1; i >= 0; i-- {
		siftDown(h, i)
	}
	for i := k; i < len(cs); i++ {
		if k > 0 && cs[i].better(&h[0]) {
			h[0], cs[i] = cs[i], h[0]
			siftDown(h, 0)
		}
	}
	slices.SortFunc(h, func(a, b knnCand) int {
		if a.better(&b) {
			return -1
		}
		if b.better(&a) {
			return 1
		}
		return 0
	})
}

func siftDown(h []knnCand, i int) {
	for {
		w, l, r := i, 2*i+1, 2*i+2
		if l < len(h) && h[w].better(&h[l]) {
			w = l
		}
		if r < len(h) && h[w].better(&h[r]) {
			w = r
		}
		if w == i {
			return
		}
		h[i], h[w] = h[w], h[i]
		i = w
	}
}

// vote computes the neighbours and calls add for each vote, in a fixed
// order so that sums are reproducible.
func (m *SessionKNN) vote(q *Query, sc *knnScratch, add func(ItemID, float64)) {
	m.neighbors(q, sc)
	last, _ := q.Last()
	for _, c := range sc.cands {
		if c.sim <= 0 {
			continue
		}
		items, _, _ := m.idx.Session(c.no)
		refPos := -1
		if m.opts.Variant == VSTAN {
			r := sc.qitems[c.ref-1].item
			refPos = slices.Index(items, r)
		}
		for p, j := range items {
			if j == last || (m.cat != nil && !m.cat.Available(j)) {
				continue
			}
			v := c.sim
			if refPos >= 0 {
				v *= math.Exp(-math.Abs(float64(p-refPos)) / m.opts.INH)
			}
			add(j, v)
		}
	}
}
