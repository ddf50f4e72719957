package models

import (
	"slices"
	"sync"
)

// Scored is a candidate and its score.
type Scored struct {
	Item  ItemID
	Score float64
}

// cmpScore orders by score descending, then id ascending, so rankings are
// deterministic.
func cmpScore(sa, sb float64, a, b ItemID) int {
	switch {
	case sa > sb:
		return -1
	case sa < sb:
		return 1
	case a < b:
		return -1
	case a > b:
		return 1
	}
	return 0
}

// better reports whether x ranks before y.
func better(x, y Scored) bool { return cmpScore(x.Score, y.Score, x.Item, y.Item) < 0 }

// TopK returns the k best-scored items of s for which skip is false (skip
// may be nil), best first, ties by lower id. It appends to dst. Selection
// keeps a heap of the k best seen, so a query with many candidates costs
// n log k rather than a full sort.
func TopK(dst []Scored, s *Scores, k int, skip func(ItemID) bool) []Scored {
	return topOf(dst, s.Entries(), k, skip)
}

// topOf is TopK over a slice of candidates, each item at most once.
func topOf(dst []Scored, cands []Scored, k int, skip func(ItemID) bool) []Scored {
	if k <= 0 {
		return dst
	}
	t := topSel{h: dst, start: len(dst), k: k}
	for _, c := range cands {
		// Once the heap is full, a candidate scoring below its worst is
		// out after one float comparison, which is the common case.
		if c.Score <= 0 || (t.full && c.Score < t.floor) {
			continue
		}
		t.offer(c, skip)
	}
	return t.sorted()
}

// topOfRow is topOf over the entries of a row, read in place: a model
// whose scores are one row's weights (sr, markov) ranks a short row
// without copying it into a candidate table first. The answer is topOf's
// over the same entries: the ranking is a total order, so it does not
// depend on the order entries are visited in.
func topOfRow(dst []Scored, r *row, k int, skip func(ItemID) bool) []Scored {
	if k <= 0 {
		return dst
	}
	t := topSel{h: dst, start: len(dst), k: k}
	for _, sl := range r.slots {
		if sl.key == 0 || sl.val <= 0 || (t.full && sl.val < t.floor) {
			continue
		}
		t.offer(Scored{sl.key - 1, sl.val}, skip)
	}
	return t.sorted()
}

// topSel selects the k best candidates offered: h[start:] is a min-heap
// by rank, h[start] the worst of the best k so far; once it is full, floor
// is that worst score.
type topSel struct {
	h     []Scored
	start int
	k     int
	full  bool
	floor float64
}

// offer considers c, whose score is above 0 and, when the heap is full,
// not below floor.
func (t *topSel) offer(c Scored, skip func(ItemID) bool) {
	// Ask skip only of a candidate that would enter: most do not.
	if (t.full && !better(c, t.h[t.start])) || (skip != nil && skip(c.Item)) {
		return
	}
	if !t.full {
		t.h = append(t.h, c)
		topSiftUp(t.h[t.start:], len(t.h)-t.start-1)
		if t.full = len(t.h)-t.start == t.k; t.full {
			t.floor = t.h[t.start].Score
		}
		return
	}
	t.h[t.start] = c
	topSiftDown(t.h[t.start:], 0)
	t.floor = t.h[t.start].Score
}

// sorted returns the selection best first, after whatever h held before.
func (t *topSel) sorted() []Scored {
	slices.SortFunc(t.h[t.start:], func(x, y Scored) int { return cmpScore(x.Score, y.Score, x.Item, y.Item) })
	return t.h
}

func topSiftUp(h []Scored, i int) {
	for i > 0 {
		p := (i - 1) / 2
		if !better(h[p], h[i]) { // parent not better than child: heap order holds
			break
		}
		h[p], h[i] = h[i], h[p]
		i = p
	}
}

func topSiftDown(h []Scored, i int) {
	for {
		l := 2*i + 1
		if l >= len(h) {
			return
		}
		w := l
		if r := l + 1; r < len(h) && better(h[l], h[r]) {
			w = r // the worse child
		}
		if !better(h[i], h[w]) {
			return
		}
		h[i], h[w] = h[w], h[i]
		i = w
	}
}

// scoresPool recycles candidate tables across queries; a query's table is
// reset before reuse, so no state crosses queries.
type scoresPool struct{ p sync.Pool }

func (sp *scoresPool) get() *Scores {
	if s, ok := sp.p.Get().(*Scores); ok {
		return s
	}
	return NewScores(0)
}

func (sp *scoresPool) put(s *Scores) {
	if s.Len() > 1<<16 {
		return // a rare huge table is not worth keeping
	}
	s.Reset()
	sp.p.Put(s)
}
