package session

import (
	"bytes"
	"encoding/json"
	"io"
	"net/http"
	"net/http/httptest"
	"testing"
	"time"

	"waymark/bench/synth"
)

// The handler's own cost of POST /v1/next, with no network and no wrk: a
// service learns 200k synthetic events (100k items) through its HTTP
// ingest, then the /v1/next handler answers varied sessions of 1 to 20
// clicks through an httptest recorder, beside a bare handler that reads
// the body and writes a body of the same size (bench/cmd/http runs the
// same comparison over loopback with wrk). The server has no publisher, so
// exploration impressions are not put on the bus. Profile with
//
//	go test -run '^$' -bench BenchmarkPostNext -cpuprofile cpu.out ./session
func BenchmarkPostNext(b *testing.B) {
	s := newTestService(b, b.TempDir())
	defer shutdown(b, s)
	base := "http://" + s.HTTPAddr()
	g := synth.NewGen(synth.Options{Items: 100_000, Concurrent: 1000})
	const events = 200_000
	var buf []byte
	for i := range events {
		ev := g.Next()
		buf = ev.AppendJSON(buf)
		buf = append(buf, '\n')
		if (i+1)%20_000 == 0 {
			resp, err := http.Post(base+"/v1/events", "application/x-ndjson", bytes.NewReader(buf))
			if err != nil {
				b.Fatal(err)
			}
			resp.Body.Close()
			buf = buf[:0]
		}
	}
	waitFor(b, "events applied", 5*time.Minute, func() bool { return s.Engine().Stats().EventsApplied == events })

	q := synth.NewGen(synth.Options{Items: 100_000, Seed: 4242, SessionPrefix: "q"})
	bodies := make([][]byte, 2000)
	for i := range bodies {
		sess := make([]string, 1+i%20)
		for j := range sess {
			sess[j] = q.Next().Item
		}
		bodies[i], _ = json.Marshal(map[string]any{"items": sess, "k": 10})
	}
	h := NewServer(s.Engine(), nil, ServerOptions{})
	size := 0
	for _, body := range bodies[:200] {
		rec := httptest.NewRecorder()
		h.ServeHTTP(rec, httptest.NewRequest("POST", "/v1/next", bytes.NewReader(body)))
		if rec.Code != 200 {
			b.Fatalf("POST /v1/next: %d %s", rec.Code, rec.Body)
		}
		size += rec.Body.Len()
	}
	answer := bytes.Repeat([]byte("x"), size/200)
	bare := http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		_, _ = io.Copy(io.Discard, r.Body)
		w.Header().Set("Content-Type", "application/json")
		_, _ = w.Write(answer)
	})
	for _, c := range []struct {
		name string
		h    http.Handler
	}{{"waymark", h}, {"bare", bare}} {
		b.Run(c.name, func(b *testing.B) {
			b.ReportAllocs()
			i := 0
			for b.Loop() {
				rec := httptest.NewRecorder()
				c.h.ServeHTTP(rec, httptest.NewRequest("POST", "/v1/next", bytes.NewReader(bodies[i%len(bodies)])))
				if rec.Code != 200 {
					b.Fatalf("%d", rec.Code)
				}
				i++
			}
		})
	}
}
