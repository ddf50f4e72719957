package models

import (
	"fmt"
	"math/rand/v2"
	"os"
	"runtime"
	"testing"
	"time"
)

// benchIndex fills a session index with n generated sessions: 2 to 8
// clicks each on 200,000 items drawn from a Zipf law (s = 1.1), so the
// popular items' posting lists are full at every size, as in a real shop.
func benchIndex(b *testing.B, n int) *SessionIndex {
	b.Helper()
	idx, err := NewSessionIndex(SessionIndexOptions{MaxSessions: n, Retention: 3650 * 24 * time.Hour})
	if err != nil {
		b.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(1, 2))
	z := rand.NewZipf(rng, 1.1, 1, 199_999)
	ts := int64(1_767_225_600_000)
	for no := uint64(1); no <= uint64(n); no++ {
		for range 2 + rng.IntN(7) {
			ts += 3
			idx.Observe(&Observation{Item: ItemID(z.Uint64()), TS: ts, SessionNo: no})
		}
	}
	return idx
}

// benchQueries returns sessions of 1 to 5 clicks drawn like the stored ones.
func benchQueries(now int64) []*Query {
	rng := rand.New(rand.NewPCG(3, 4))
	z := rand.NewZipf(rng, 1.1, 1, 199_999)
	qs := make([]*Query, 256)
	for i := range qs {
		q := &Query{Now: now}
		for range 1 + rng.IntN(5) {
			q.Session = append(q.Session, Step{Item: ItemID(z.Uint64()), TS: now})
		}
		qs[i] = q
	}
	return qs
}

// Query cost of the session-kNN models against the number of stored
// sessions. A query reads only its items' posting lists (at most Postings
// entries each) and the M sessions it samples, so the time per query should
// stay flat from 100k to 10M sessions. The 10M case needs about 2 GB and a
// minute to build; it runs when WAYMARK_BENCH_10M=1.
func BenchmarkSessionKNNQuery(b *testing.B) {
	sizes := []int{100_000, 1_000_000}
	if os.Getenv("WAYMARK_BENCH_10M") == "1" {
		sizes = append(sizes, 10_000_000)
	}
	for _, n := range sizes {
		var before, after runtime.MemStats
		runtime.GC()
		runtime.ReadMemStats(&before)
		idx := benchIndex(b, n)
		runtime.GC()
		runtime.ReadMemStats(&after)
		perSession := float64(after.HeapAlloc-before.HeapAlloc) / float64(idx.Len())
		qs := benchQueries(idx.maxTS)
		for _, v := range []KNNVariant{SKNN, VSKNN, VSTAN} {
			m, err := NewSessionKNN(DefaultKNNOptions(v), idx, nil)
			if err != nil {
				b.Fatal(err)
			}
			b.Run(fmt.Sprintf("%s/sessions=%d", v, n), func(b *testing.B) {
				out := NewScores(4096)
				b.ReportAllocs()
				i := 0
				for b.Loop() {
					out.Reset()
					m.Candidates(qs[i%len(qs)], out)
					i++
				}
				b.ReportMetric(perSession, "heapB/session")
			})
		}
		runtime.KeepAlive(idx)
	}
}

// BenchmarkSessionIndexObserve is the learning cost of one click.
func BenchmarkSessionIndexObserve(b *testing.B) {
	idx, err := NewSessionIndex(SessionIndexOptions{MaxSessions: 100_000})
	if err != nil {
		b.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(1, 2))
	z := rand.NewZipf(rng, 1.1, 1, 199_999)
	ts := int64(1_767_225_600_000)
	no := uint64(1)
	b.ReportAllocs()
	i := 0
	for b.Loop() {
		ts += 3
		if i%5 == 0 {
			no++
		}
		idx.Observe(&Observation{Item: ItemID(z.Uint64()), TS: ts, SessionNo: no})
		i++
	}
}

// Query cost of the content model over a generated catalogue: 50 categories
// in 10 departments, 200 tags, titles of four words from 2,000.
func BenchmarkContentQuery(b *testing.B) {
	for _, n := range []int{10_000, 100_000} {
		c, err := NewContent(DefaultContentOptions(), nil)
		if err != nil {
			b.Fatal(err)
		}
		rng := rand.New(rand.NewPCG(5, 6))
		for id := range n {
			attrs := map[string][]string{
				"category": {fmt.Sprintf("dept%d/cat%d", id%10, id%50)},
				"tags":     {fmt.Sprintf("tag%d", rng.IntN(200)), fmt.Sprintf("tag%d", rng.IntN(200))},
				"title":    {fmt.Sprintf("w%d w%d w%d w%d", rng.IntN(2000), rng.IntN(2000), rng.IntN(2000), rng.IntN(2000))},
			}
			c.ObserveItem(&ItemInfo{Item: ItemID(id), Attrs: attrs, Available: true})
		}
		b.Run(fmt.Sprintf("items=%d", n), func(b *testing.B) {
			out := NewScores(4096)
			b.ReportAllocs()
			i := 0
			for b.Loop() {
				out.Reset()
				c.Candidates(&Query{Session: []Step{{Item: ItemID(i * 7919 % n)}}}, out)
				i++
			}
		})
	}
}
