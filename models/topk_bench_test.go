package models

import (
	"math/rand/v2"
	"testing"
)

// The query hot path of every model: gather raw scores of a few hundred
// candidates, then rank the best k. These benchmarks set the current way
// (a Scores table, then TopK's heap over its entries) beside a Go map, fresh
// or pooled (the way before), and the bare alternative (a dense score array
// indexed by item id with a touched list, then the same kind of heap over a
// plain slice), for a row of 400 neighbours (a full neighbour list: twice
// the default cap of 200 before pruning) and k = 20.
// Run with
//
//	go test -run '^$' -bench 'BenchmarkGather|BenchmarkRank' -benchmem ./models

func benchRow(n int) []Scored {
	rng := rand.New(rand.NewPCG(1, 2))
	row := make([]Scored, n)
	for i := range row {
		row[i] = Scored{Item: ItemID(rng.IntN(100_000)), Score: rng.Float64()}
	}
	return row
}

func BenchmarkGather(b *testing.B) {
	row := benchRow(400)
	b.Run("scores", func(b *testing.B) {
		b.ReportAllocs()
		out := NewScores(0)
		for b.Loop() {
			out.Reset()
			for _, e := range row {
				out.Add(e.Item, e.Score)
			}
		}
	})
	b.Run("go-map", func(b *testing.B) {
		b.ReportAllocs()
		for b.Loop() {
			out := make(map[ItemID]float64)
			for _, e := range row {
				out[e.Item] += e.Score
			}
		}
	})
	b.Run("go-map-pooled", func(b *testing.B) {
		b.ReportAllocs()
		out := make(map[ItemID]float64, 512)
		for b.Loop() {
			clear(out)
			for _, e := range row {
				out[e.Item] += e.Score
			}
		}
	})
	b.Run("bare-dense", func(b *testing.B) {
		b.ReportAllocs()
		dense := make([]float64, 100_000)
		touched := make([]ItemID, 0, 512)
		for b.Loop() {
			for _, id := range touched {
				dense[id] = 0
			}
			touched = touched[:0]
			for _, e := range row {
				if dense[e.Item] == 0 {
					touched = append(touched, e.Item)
				}
				dense[e.Item] += e.Score
			}
		}
	})
}

// worse reports whether x ranks below y (the heap keeps the worst on top).
func worse(x, y Scored) bool { return cmpScore(x.Score, y.Score, x.Item, y.Item) > 0 }

// pushTop keeps the k best of the candidates seen in h, a min-heap on rank.
func pushTop(h []Scored, k int, c Scored) []Scored {
	if len(h) < k {
		h = append(h, c)
		for i := len(h) - 1; i > 0; {
			p := (i - 1) / 2
			if !worse(h[i], h[p]) {
				break
			}
			h[i], h[p] = h[p], h[i]
			i = p
		}
		return h
	}
	if !worse(h[0], c) {
		return h
	}
	h[0] = c
	for i := 0; ; {
		l, m := 2*i+1, i
		if l < len(h) && worse(h[l], h[m]) {
			m = l
		}
		if r := l + 1; r < len(h) && worse(h[r], h[m]) {
			m = r
		}
		if m == i {
			return h
		}
		h[i], h[m] = h[m], h[i]
		i = m
	}
}

func BenchmarkRank(b *testing.B) {
	row := benchRow(400)
	s := NewScores(len(row))
	m := make(map[ItemID]float64, len(row))
	for _, e := range row {
		s.Add(e.Item, e.Score)
		m[e.Item] += e.Score
	}
	b.Run("topk-over-scores", func(b *testing.B) {
		b.ReportAllocs()
		dst := make([]Scored, 0, 512)
		for b.Loop() {
			dst = TopK(dst[:0], s, 20, nil)
		}
	})
	b.Run("bare-heap-over-map", func(b *testing.B) {
		b.ReportAllocs()
		h := make([]Scored, 0, 20)
		for b.Loop() {
			h = h[:0]
			for id, v := range m {
				h = pushTop(h, 20, Scored{id, v})
			}
		}
	})
	b.Run("bare-heap-over-slice", func(b *testing.B) {
		// The same heap over a dense candidate list (see BenchmarkGather's
		// bare-dense): no map iteration at all.
		b.ReportAllocs()
		h := make([]Scored, 0, 20)
		for b.Loop() {
			h = h[:0]
			for _, c := range row {
				h = pushTop(h, 20, c)
			}
		}
	})
}

// BenchmarkPairTableAdd is the learning hot path: one weighted pair into
// a table of 100k rows, rows picked the way clicks pick them (Zipf), so
// most updates miss the cache as they do in serve.
func BenchmarkPairTableAdd(b *testing.B) {
	rng := rand.New(rand.NewPCG(3, 4))
	z := rand.NewZipf(rng, 1.1, 1, 99_999)
	pairs := make([][2]ItemID, 1<<20)
	for i := range pairs {
		pairs[i] = [2]ItemID{ItemID(z.Uint64()), ItemID(z.Uint64())}
	}
	t := newPairTable(200)
	b.ReportAllocs()
	i := 0
	for b.Loop() {
		p := pairs[i&(len(pairs)-1)]
		t.add(p[0], p[1], 1)
		i++
	}
	b.ReportMetric(float64(t.size()), "pairs")
}
