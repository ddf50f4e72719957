package models

import "slices"

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

// TopK returns the k best-scored items of s for which skip is false (skip
// may be nil), best first, ties by lower id. It appends to dst.
func TopK(dst []Scored, s Scores, k int, skip func(ItemID) bool) []Scored {
	start := len(dst)
	for id, v := range s {
		if v <= 0 || (skip != nil && skip(id)) {
			continue
		}
		dst = append(dst, Scored{id, v})
	}
	part := dst[start:]
	slices.SortFunc(part, func(x, y Scored) int { return cmpScore(x.Score, y.Score, x.Item, y.Item) })
	if len(part) > k {
		dst = dst[:start+k]
	}
	return dst
}
