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
	start := len(dst)
	// h is a min-heap by rank: h[0] is the worst of the best k so far.
	// Once it is full, floor is h[0]'s score: a candidate scoring below it
	// is out after one float comparison, which is the common case.
	h := dst
	full, floor := false, 0.0
	for _, c := range cands {
		if c.Score <= 0 || (full && c.Score < floor) {
			continue
		}
		// Ask skip only of a candidate that would enter: most do not.
		if (full && !better(c, h[start])) || (skip != nil && skip(c.Item)) {
			continue
		}
		if !full {
			h = append(h, c)
			topSiftUp(h[start:], len(h)-start-1)
			if full = len(h)-start == k; full {
				floor = h[start].Score
			}
			continue
		}
		h[start] = c
		topSiftDown(h[start:], 0)
		floor = h[start].Score
	}
	part := h[start:]
	slices.SortFunc(part, func(x, y Scored) int { return cmpScore(x.Score, y.Score, x.Item, y.Item) })
	return h
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
