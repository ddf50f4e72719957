// Command redis sets waymark beside the hand-rolled alternative (issue 6,
// figure 9): co-visitation counted in Redis sorted sets with pipelined
// ZINCRBY, for the same events, A B A B. bench/redis-compare starts a
// Redis server on loopback for it and stops it after.
//
// Redis side, per event: the client remembers each session's previous
// item p (in its own memory, as the bare counter does) and sends
// ZINCRBY cv:p 1 item and ZINCRBY cv:item 1 p, pipelined 1000 events at a
// time; a query is ZREVRANGE cv:item 0 19 WITHSCORES, one round trip.
// A second Redis ingest does the same job as waymark's core learners: every
// update bare.SameWork makes (transitions, sr's 1/gap rules, co-visitation
// both ways over the 20-item window, supports, popularity), one ZINCRBY
// each, 12.7 per event on the synthetic clicks, pipelined the same way.
//
//   - learning in process: waymark's tracker and core learners vs Redis ingest
//   - through the bus: `waymark serve` consuming a pre-filled stream (same
//     events) vs Redis ingest
//   - query: waymark p99 in process (iknn, the co-visitation model, and the
//     default blend) and over HTTP (one connection, one request at a time)
//     vs the Redis top-20 round trip
package main

import (
	"encoding/json"
	"flag"
	"fmt"
	"os"
	"path/filepath"
	"runtime"
	"strconv"
	"time"

	"waymark/bench/abab"
	"waymark/bench/bare"
	"waymark/bench/svc"
	"waymark/bench/synth"
	"waymark/models"
	"waymark/session"
	"waymark/stream"
)

func main() {
	addr := flag.String("addr", "127.0.0.1:6379", "Redis `address`")
	events := flag.Int("events", 1_000_000, "events (the template's, when given)")
	items := flag.Int("items", 100_000, "catalogue size")
	rounds := flag.Int("rounds", 3, "A B rounds")
	queries := flag.Int("queries", 5000, "queries per round")
	waymark := flag.String("waymark", "", "the waymark `binary` (with --template: the through-the-bus and HTTP comparisons)")
	template := flag.String("template", "", "pre-filled stream template `folder` of the same events (ingest fill)")
	work := flag.String("work", os.TempDir(), "scratch `folder`")
	out := flag.String("json", "", "append figures as JSON lines to `file`")
	sameRounds := flag.Int("same-rounds", 2, "A B rounds against the same updates in Redis (about 13 ZINCRBY per event, so slower)")
	flag.Parse()
	rec, closeRec, err := abab.NewRecorder(*out, "redis")
	if err != nil {
		fail(err)
	}
	defer closeRec()
	rc, err := bare.DialRedis(*addr)
	if err != nil {
		fail(err)
	}
	defer rc.Close()
	if v, err := rc.Do("INFO", "server"); err == nil {
		if s, ok := v.(string); ok {
			for _, l := range splitLines(s) {
				if len(l) > 14 && l[:14] == "redis_version:" {
					fmt.Println("redis:", l)
				}
			}
		}
	}
	evs := synth.Generate(synth.Options{Events: *events, Items: *items, Concurrent: 1000})
	fmt.Printf("redis: %d events over %d items, pipelined ZINCRBY pairs, 1000 events per pipeline\n", len(evs), *items)

	redisIngest := func(int) (float64, error) {
		if _, err := rc.Do("FLUSHALL"); err != nil {
			return 0, err
		}
		last := map[string]string{}
		start := time.Now()
		pending := 0
		for i := range evs {
			ev := &evs[i]
			if p, ok := last[ev.Session]; ok && p != ev.Item {
				rc.Send("ZINCRBY", "cv:"+p, "1", ev.Item)
				rc.Send("ZINCRBY", "cv:"+ev.Item, "1", p)
				pending += 2
			}
			last[ev.Session] = ev.Item
			if (i+1)%1000 == 0 || i == len(evs)-1 {
				if err := rc.Drain(pending); err != nil {
					return 0, err
				}
				pending = 0
			}
		}
		return float64(len(evs)) / time.Since(start).Seconds(), nil
	}
	// The same job in Redis: every update waymark's core learners make
	// for a click (bare.SameWork's, key for key), one ZINCRBY each.
	sameIngest := func(int) (float64, error) {
		if _, err := rc.Do("FLUSHALL"); err != nil {
			return 0, err
		}
		// sr's 1/gap as ZINCRBY increments
		srWeight := [...]string{1: "1", 2: "0.5", 3: "0.3333333333333333", 4: "0.25", 5: "0.2"}
		win := map[string][]string{}
		start := time.Now()
		pending, sent := 0, 0
		send := func(key, member string, by string) {
			rc.Send("ZINCRBY", key, by, member)
			pending++
			sent++
		}
		for i := range evs {
			ev := &evs[i]
			send("pop", ev.Item, "1")
			w := win[ev.Session]
			n := len(w)
			if n == 0 || w[n-1] != ev.Item {
				if n > 0 {
					send("tr:"+w[n-1], ev.Item, "1")
				}
				for gap := 1; gap <= 5 && gap <= n; gap++ {
					if a := w[n-gap]; a != ev.Item {
						send("sr:"+a, ev.Item, srWeight[gap])
					}
				}
				if !containsItem(w, ev.Item) {
					send("sup", ev.Item, "1")
					for j, x := range w {
						if !containsItem(w[:j], x) {
							send("cv:"+x, ev.Item, "1")
							send("cv:"+ev.Item, x, "1")
						}
					}
				}
				if n == 20 {
					copy(w, w[1:])
					w = w[:n-1]
				}
				win[ev.Session] = append(w, ev.Item)
			}
			if (i+1)%1000 == 0 || i == len(evs)-1 {
				if err := rc.Drain(pending); err != nil {
					return 0, err
				}
				pending = 0
			}
		}
		r := float64(len(evs)) / time.Since(start).Seconds()
		fmt.Printf("  the same updates in Redis: %.1f ZINCRBY per event\n", float64(sent)/float64(len(evs)))
		return r, nil
	}
	var p *session.Pipeline
	inProcess := func(int) (float64, error) {
		o := session.DefaultPipelineOptions()
		o.Models = []string{"blend", "iknn"}
		var err error
		if p, err = session.NewPipeline(o); err != nil {
			return 0, err
		}
		runtime.GC()
		start := time.Now()
		for i := range evs {
			p.Apply(&evs[i])
		}
		return float64(len(evs)) / time.Since(start).Seconds(), nil
	}
	learn, err := abab.Run("vs Redis: waymark learning in process, tracker + core learners (A) vs Redis ZINCRBY ingest (B)", "events/s", *rounds, inProcess, redisIngest)
	if err != nil {
		fail(err)
	}
	learn.Target = 10
	rec.Pair(os.Stdout, learn)
	same, err := abab.Run("vs Redis: waymark learning in process, tracker + core learners (A) vs the same updates as ZINCRBY in Redis (B)", "events/s", *sameRounds, inProcess, sameIngest)
	if err != nil {
		fail(err)
	}
	same.Target = 10
	rec.Pair(os.Stdout, same)
	if v, err := rc.Do("INFO", "memory"); err == nil {
		if s, ok := v.(string); ok {
			for _, l := range splitLines(s) {
				if len(l) > 17 && l[:17] == "used_memory_human" {
					fmt.Println("  redis after ingest:", l)
				}
			}
		}
	}

	if *template != "" && *waymark != "" {
		var s *svc.Serve
		runs := 0
		busRun := func(int) (float64, error) {
			if s != nil {
				s.Stop(time.Minute)
				os.RemoveAll(s.Dir)
			}
			runs++
			dir := filepath.Join(*work, fmt.Sprintf("redis-serve-%d", runs))
			if err := svc.CopyDir(*template, dir); err != nil {
				return 0, err
			}
			var err error
			if s, err = svc.Start(*waymark, dir); err != nil {
				return 0, err
			}
			pr, err := s.WaitApplied(uint64(*events), 20*time.Millisecond, 15*time.Minute)
			return pr.Rate(), err
		}
		bus, err := abab.Run("vs Redis: waymark serve through the bus, pre-filled stream (A) vs Redis ZINCRBY ingest (B)", "events/s", *rounds, busRun, redisIngest)
		if err != nil {
			fail(err)
		}
		bus.Target = 2.5
		rec.Pair(os.Stdout, bus)
		busSame, err := abab.Run("vs Redis: waymark serve through the bus, pre-filled stream (A) vs the same updates as ZINCRBY in Redis (B)", "events/s", *sameRounds, busRun, sameIngest)
		if err != nil {
			fail(err)
		}
		busSame.Target = 2.5
		rec.Pair(os.Stdout, busSame)
		defer func() { s.Stop(time.Minute); os.RemoveAll(s.Dir) }()
		// HTTP round trip, one connection, one request at a time.
		qs := lastItems(*items, *queries)
		httpQ, err := abab.Run("vs Redis: waymark POST /v1/next k=20 one at a time, p99 (A) vs Redis ZREVRANGE top-20 round trip p99 (B)", "µs", *rounds,
			func(int) (float64, error) {
				ds := make([]time.Duration, 0, len(qs))
				for _, it := range qs {
					b, _ := json.Marshal(map[string]any{"items": []string{it}, "k": 20})
					t := time.Now()
					if _, err := s.Post("/v1/next", b); err != nil {
						return 0, err
					}
					ds = append(ds, time.Since(t))
				}
				return abab.Summarize(ds).P99, nil
			}, redisQuery(rc, qs))
		if err != nil {
			fail(err)
		}
		httpQ.Target, httpQ.Below = 1.0/3, true
		rec.Pair(os.Stdout, httpQ)
	}

	// In process query vs the Redis round trip (Redis holds the last
	// ingest's counts; p the last in-process pipeline's).
	qs := lastItems(*items, *queries)
	for _, spec := range []string{"iknn", "blend"} {
		r, _ := p.Recommender(spec)
		pair, err := abab.Run("vs Redis: waymark "+spec+" next items k=20 in process, p99 (A) vs Redis ZREVRANGE top-20 round trip p99 (B)", "µs", *rounds,
			func(int) (float64, error) {
				ds := make([]time.Duration, 0, len(qs))
				dst := make([]models.Scored, 0, 20)
				for _, it := range qs {
					t := time.Now()
					q := p.NewQuery([]string{it}, 0)
					dst = r.Recommend(&q, 20, nil, dst[:0])
					ds = append(ds, time.Since(t))
				}
				return abab.Summarize(ds).P99, nil
			}, redisQuery(rc, qs))
		if err != nil {
			fail(err)
		}
		pair.Target, pair.Below = 1.0/3, true
		rec.Pair(os.Stdout, pair)
	}
	var ds []time.Duration
	for _, it := range qs {
		t := time.Now()
		if _, err := rc.Do("ZREVRANGE", "cv:"+it, "0", "19", "WITHSCORES"); err != nil {
			fail(err)
		}
		ds = append(ds, time.Since(t))
	}
	lat := abab.Summarize(ds)
	fmt.Println("  redis top-20 round trip, one more pass:", lat)
	rec.Record("redis top-20", lat)
}

func redisQuery(rc *bare.Redis, qs []string) func(int) (float64, error) {
	return func(int) (float64, error) {
		ds := make([]time.Duration, 0, len(qs))
		for _, it := range qs {
			t := time.Now()
			if _, err := rc.Do("ZREVRANGE", "cv:"+it, "0", "19", "WITHSCORES"); err != nil {
				return 0, err
			}
			ds = append(ds, time.Since(t))
		}
		return abab.Summarize(ds).P99, nil
	}
}

// lastItems returns n session-last items drawn like the stream's clicks.
func lastItems(items, n int) []string {
	g := synth.NewGen(synth.Options{Items: items, Seed: 7, SessionPrefix: "q"})
	out := make([]string, n)
	for i := range out {
		out[i] = g.Next().Item
	}
	return out
}

func splitLines(s string) []string {
	var out []string
	start := 0
	for i := 0; i < len(s); i++ {
		if s[i] == '\n' {
			l := s[start:i]
			if len(l) > 0 && l[len(l)-1] == '\r' {
				l = l[:len(l)-1]
			}
			out = append(out, l)
			start = i + 1
		}
	}
	return out
}

func containsItem(w []string, it string) bool {
	for _, x := range w {
		if x == it {
			return true
		}
	}
	return false
}

func fail(err error) {
	fmt.Fprintln(os.Stderr, "redis:", err)
	os.Exit(1)
}

var (
	_ = strconv.Itoa
	_ = stream.KindClick
)
