package eval

import (
	"bufio"
	"context"
	"errors"
	"io"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"testing"
	"time"

	"waymark/stream"
)

// benchEvents is the size of the generated log; WAYMARK_BENCH_EVENTS
// changes it.
func benchEvents(b *testing.B) int {
	if s := os.Getenv("WAYMARK_BENCH_EVENTS"); s != "" {
		n, err := strconv.Atoi(s)
		if err != nil || n < 1000 {
			b.Fatalf("WAYMARK_BENCH_EVENTS=%q: want an integer >= 1000", s)
		}
		return n
	}
	return 1_000_000
}

// writeBenchLog writes n click events of an invented shop as JSON lines:
// 20,000 items with Zipf popularity, 300 sessions open at a time, each
// browsing near its last item or jumping to a popular one, about 6 clicks
// per session, 20 ms apart on average.
func writeBenchLog(b testing.TB, n int) string {
	b.Helper()
	path := filepath.Join(b.TempDir(), "bench.jsonl")
	f, err := os.Create(path)
	if err != nil {
		b.Fatal(err)
	}
	w := bufio.NewWriterSize(f, 1<<20)
	rng := rand.New(rand.NewPCG(42, 42))
	const items = 20_000
	zipf := rand.NewZipf(rng, 1.1, 2, items-1)
	type open struct {
		key  string
		last uint64
		left int
	}
	active := make([]open, 300)
	next := 0
	newSession := func() open {
		next++
		return open{key: "visitor-" + strconv.Itoa(next), last: zipf.Uint64(), left: 1 + rng.IntN(11)}
	}
	for i := range active {
		active[i] = newSession()
	}
	ts := time.Date(2026, 4, 1, 0, 0, 0, 0, time.UTC).UnixMilli()
	var buf []byte
	for range n {
		i := rng.IntN(len(active))
		s := &active[i]
		if rng.Float64() < 0.7 {
			s.last = (s.last + 1 + uint64(rng.IntN(5))) % items
		} else {
			s.last = zipf.Uint64()
		}
		ts += int64(rng.IntN(40))
		ev := stream.Event{Session: s.key, Item: "sku-" + strconv.FormatUint(s.last, 10), TS: ts}
		buf = ev.AppendJSON(buf[:0])
		buf = append(buf, '\n')
		if _, err := w.Write(buf); err != nil {
			b.Fatal(err)
		}
		if s.left--; s.left == 0 {
			*s = newSession()
		}
	}
	if err := w.Flush(); err != nil {
		b.Fatal(err)
	}
	if err := f.Close(); err != nil {
		b.Fatal(err)
	}
	return path
}

// BenchmarkBareDecode reads and decodes the generated log and nothing
// else: the baseline the replay is compared with.
func BenchmarkBareDecode(b *testing.B) {
	n := benchEvents(b)
	path := writeBenchLog(b, n)
	b.ReportAllocs()
	b.ResetTimer()
	start := time.Now()
	total := 0
	for range b.N {
		r, err := stream.OpenFile(path)
		if err != nil {
			b.Fatal(err)
		}
		for {
			_, err := r.Next()
			if errors.Is(err, io.EOF) {
				break
			}
			if err != nil {
				b.Fatal(err)
			}
			total++
		}
		r.Close()
	}
	b.ReportMetric(float64(total)/time.Since(start).Seconds(), "events/s")
}

// BenchmarkReplaySR runs the full prequential evaluation of Sequential
// Rules at K = 1, 5, 10, 20 over the same log: read, decode, sort check,
// then for every click ask, score and learn.
func BenchmarkReplaySR(b *testing.B) {
	n := benchEvents(b)
	path := writeBenchLog(b, n)
	o := DefaultOptions()
	o.Models = []string{"sr"}
	b.ReportAllocs()
	b.ResetTimer()
	start := time.Now()
	total := 0
	var queries int64
	for range b.N {
		r, err := stream.OpenFile(path)
		if err != nil {
			b.Fatal(err)
		}
		l, err := Load(context.Background(), []Source{{Name: path, Reader: r}}, LoadOptions{})
		r.Close()
		if err != nil {
			b.Fatal(err)
		}
		rep, err := Run(context.Background(), l, o)
		if err != nil {
			b.Fatal(err)
		}
		total += l.Len()
		queries = rep.Scoring.Queries
	}
	b.ReportMetric(float64(total)/time.Since(start).Seconds(), "events/s")
	b.ReportMetric(float64(queries), "queries")
}

// TestBenchLogShape keeps the benchmark's generator honest: sessions of
// several clicks, a wide catalogue, event times in order.
func TestBenchLogShape(t *testing.T) {
	path := writeBenchLog(t, 20_000)
	r, err := stream.OpenFile(path)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	l, err := Load(context.Background(), []Source{{Name: path, Reader: r}}, LoadOptions{StrictOrder: true})
	if err != nil {
		t.Fatal(err)
	}
	s := l.Summarize(30 * 60 * 1000)
	if s.Events != 20_000 || s.MeanLength < 4 || s.MeanLength > 8 || s.Items < 2000 || s.BadRecords != 0 {
		t.Errorf("generated log: %s, mean length %.2f", s.DatasetLine(), s.MeanLength)
	}
}
