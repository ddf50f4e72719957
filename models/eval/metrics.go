package eval

import "math"

// QueryScore is one query's metrics at one cut-off K.
type QueryScore struct {
	Hit       float64 // 1 when a relevant item is in the top K
	RR        float64 // 1/rank of the first relevant item in the top K, else 0
	NDCG      float64 // DCG of the top K over the best possible DCG
	Precision float64 // relevant items in the top K, over K
	Recall    float64 // relevant items in the top K, over all relevant items
}

// ScoreRanking scores a ranked list at cut-off k. rel[i] says whether the
// item at rank i+1 is relevant; nRel is the number of relevant items in
// total, ranked or not (for the next-item target, 1). Gains are binary and
// the discount is 1/log2(rank+1), so with one relevant item NDCG is
// 1/log2(rank+1) and Recall equals Hit. A query with nRel 0 scores 0.
func ScoreRanking(rel []bool, nRel, k int) QueryScore {
	var out [1]QueryScore
	scoreCuts(rel, nRel, []int{k}, discounts(k), out[:])
	return out[0]
}

// discounts returns 1/log2(i+2), the DCG discount of 0-based rank i, for
// i < n. Callers keep the table: the logarithms would otherwise dominate
// the cost of scoring a query.
func discounts(n int) []float64 {
	d := make([]float64, n)
	for i := range d {
		d[i] = 1 / math.Log2(float64(i+2))
	}
	return d
}

// scoreCuts scores a ranked list at every cut-off of ks (ascending) in one
// pass; disc holds at least ks[len(ks)-1] discounts.
func scoreCuts(rel []bool, nRel int, ks []int, disc []float64, out []QueryScore) {
	clear(out)
	if nRel <= 0 {
		return
	}
	hits, first := 0, 0
	dcg, idcg := 0.0, 0.0
	j := 0
	for i := 0; j < len(ks); i++ {
		if i < len(rel) && rel[i] {
			hits++
			if first == 0 {
				first = i + 1
			}
			dcg += disc[i]
		}
		if i < nRel {
			idcg += disc[i] // the ideal list puts every relevant item first
		}
		for ; j < len(ks) && ks[j] == i+1; j++ {
			o := &out[j]
			if hits > 0 {
				o.Hit = 1
				o.RR = 1 / float64(first)
				o.NDCG = dcg / idcg
			}
			o.Precision = float64(hits) / float64(ks[j])
			o.Recall = float64(hits) / float64(nRel)
		}
	}
}
