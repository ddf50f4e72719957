package eval

import (
	"encoding/json"
	"math"
	"os"
	"slices"
	"testing"
	"time"
)

// reference is testdata/sklearn_metrics.json, written by
// testdata/gen_sklearn.py with scikit-learn 1.2.1, SciPy 1.10.1 and NumPy
// 1.24.2 (Debian 12 packages python3-sklearn, python3-scipy, python3-numpy).
type reference struct {
	Libraries map[string]string `json:"libraries"`
	Ranking   []struct {
		Scores   []float64 `json:"scores"`
		Relevant []int     `json:"relevant"`
		LRAP     *float64  `json:"lrap"`
		At       []struct {
			K         int     `json:"k"`
			NDCG      float64 `json:"ndcg"`
			Precision float64 `json:"precision"`
			Recall    float64 `json:"recall"`
			Hit       float64 `json:"hit"`
			RR        float64 `json:"rr"`
		} `json:"at"`
	} `json:"ranking"`
	Paired []struct {
		X         []float64 `json:"x"`
		Y         []float64 `json:"y"`
		Statistic float64   `json:"statistic"`
		P         float64   `json:"p"`
	} `json:"paired"`
}

func loadReference(t *testing.T) *reference {
	t.Helper()
	b, err := os.ReadFile("testdata/sklearn_metrics.json")
	if err != nil {
		t.Fatal(err)
	}
	var ref reference
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatal(err)
	}
	if ref.Libraries["scikit-learn"] != "1.2.1" || len(ref.Ranking) == 0 || len(ref.Paired) == 0 {
		t.Fatalf("reference file from unexpected libraries %v or empty", ref.Libraries)
	}
	return &ref
}

// rankBy orders relevance labels by descending score, the ranking the
// reference library scores.
func rankBy(scores []float64, relevant []int) (rel []bool, nRel int) {
	idx := make([]int, len(scores))
	for i := range idx {
		idx[i] = i
	}
	slices.SortStableFunc(idx, func(a, b int) int {
		switch {
		case scores[a] > scores[b]:
			return -1
		case scores[a] < scores[b]:
			return 1
		}
		return 0
	})
	for _, i := range idx {
		rel = append(rel, relevant[i] == 1)
		nRel += relevant[i]
	}
	return rel, nRel
}

// TestMetricsMatchScikitLearn checks NDCG@k against sklearn.metrics.ndcg_score,
// Precision@k and Recall@k against precision_score and recall_score of the
// top-k indicator, and reciprocal rank against
// label_ranking_average_precision_score (equal to 1/rank with one relevant
// item), all from scikit-learn 1.2.1.
func TestMetricsMatchScikitLearn(t *testing.T) {
	ref := loadReference(t)
	const tol = 1e-12
	for ci, c := range ref.Ranking {
		rel, nRel := rankBy(c.Scores, c.Relevant)
		ks := make([]int, len(c.At))
		for i, a := range c.At {
			ks[i] = a.K
		}
		multi := make([]QueryScore, len(ks))
		scoreCuts(rel, nRel, ks, discounts(ks[len(ks)-1]), multi)
		for i, a := range c.At {
			got := ScoreRanking(rel, nRel, a.K)
			if got != multi[i] {
				t.Errorf("case %d k=%d: one cut-off %+v differs from all at once %+v", ci, a.K, got, multi[i])
			}
			for _, chk := range []struct {
				name      string
				got, want float64
			}{
				{"NDCG", got.NDCG, a.NDCG},
				{"Precision", got.Precision, a.Precision},
				{"Recall", got.Recall, a.Recall},
				{"Hit", got.Hit, a.Hit},
				{"RR", got.RR, a.RR},
			} {
				if math.Abs(chk.got-chk.want) > tol {
					t.Errorf("case %d k=%d %s = %.15g, reference %.15g", ci, a.K, chk.name, chk.got, chk.want)
				}
			}
		}
		if c.LRAP != nil {
			// Without a cut-off, reciprocal rank is LRAP for one relevant item.
			got := ScoreRanking(rel, nRel, len(rel)).RR
			if math.Abs(got-*c.LRAP) > tol {
				t.Errorf("case %d: RR %.15g, label_ranking_average_precision_score %.15g", ci, got, *c.LRAP)
			}
		}
	}
}

// TestWilcoxonMatchesSciPy checks the signed-rank test against
// scipy.stats.wilcoxon(zero_method="wilcox", correction=False,
// method="approx") of SciPy 1.10.1, whose statistic is min(W+, W−).
func TestWilcoxonMatchesSciPy(t *testing.T) {
	ref := loadReference(t)
	for ci, c := range ref.Paired {
		got := Wilcoxon(c.X, c.Y)
		m := float64(got.NonZero)
		wMinus := m*(m+1)/2 - got.W
		if stat := math.Min(got.W, wMinus); math.Abs(stat-c.Statistic) > 1e-9 {
			t.Errorf("case %d: statistic %v, scipy %v", ci, stat, c.Statistic)
		}
		if math.Abs(got.P-c.P) > 1e-9 {
			t.Errorf("case %d: p %.12g, scipy %.12g", ci, got.P, c.P)
		}
	}
}

func TestScoreRankingEdges(t *testing.T) {
	tests := []struct {
		name string
		rel  []bool
		nRel int
		k    int
		want QueryScore
	}{
		{"empty list", nil, 1, 20, QueryScore{}},
		{"no relevant item", []bool{false, false}, 0, 20, QueryScore{}},
		{"hit at 3 of a short list", []bool{false, false, true}, 1, 20,
			QueryScore{Hit: 1, RR: 1.0 / 3, NDCG: 0.5, Precision: 1.0 / 20, Recall: 1}},
		{"hit beyond k", []bool{false, false, true}, 1, 2, QueryScore{}},
		{"two of three relevant ranked", []bool{true, false, true}, 3, 5,
			QueryScore{Hit: 1, RR: 1, NDCG: (1 + 0.5) / (1 + 1/math.Log2(3) + 0.5), Precision: 2.0 / 5, Recall: 2.0 / 3}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got := ScoreRanking(tt.rel, tt.nRel, tt.k)
			for _, c := range [][2]float64{{got.Hit, tt.want.Hit}, {got.RR, tt.want.RR}, {got.NDCG, tt.want.NDCG},
				{got.Precision, tt.want.Precision}, {got.Recall, tt.want.Recall}} {
				if math.Abs(c[0]-c[1]) > 1e-12 {
					t.Fatalf("got %+v, want %+v", got, tt.want)
				}
			}
		})
	}
}

func TestWilcoxonDegenerate(t *testing.T) {
	same := Wilcoxon([]float64{1, 0.5, 0}, []float64{1, 0.5, 0})
	if same.P != 1 || same.Z != 0 || same.NonZero != 0 {
		t.Errorf("identical samples: %+v, want p 1, z 0", same)
	}
	if e := Wilcoxon(nil, nil); e.P != 1 {
		t.Errorf("empty samples: p %v, want 1", e.P)
	}
}

func TestLatencyQuantiles(t *testing.T) {
	var h latencyHist
	for i := 1; i <= 1000; i++ {
		h.add(time.Duration(i) * time.Microsecond)
	}
	// 1..1000 µs: the median is 500 µs and p99 990 µs, within the
	// histogram's 1/16 relative resolution.
	for _, c := range []struct{ q, want float64 }{{0.5, 0.5}, {0.99, 0.99}} {
		got := h.quantile(c.q)
		if math.Abs(got-c.want)/c.want > 1.0/16 {
			t.Errorf("quantile(%v) = %v ms, want %v ms within 1/16", c.q, got, c.want)
		}
	}
	var empty latencyHist
	if empty.quantile(0.5) != 0 {
		t.Error("empty histogram quantile not 0")
	}
}
