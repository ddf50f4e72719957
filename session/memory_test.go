package session

import (
	"math/rand/v2"
	"os"
	"runtime"
	"strconv"
	"testing"

	"waymark/store"
	"waymark/stream"
)

// TestMemoryPerSessionAndItem measures the live Go heap a tracked session
// and an item cost with serve's default models and flush cycle, the
// figures deploy/SCALING.md sizes a replica's memory budget with
// (WAYMARK_LONG=1 go test -v -run TestMemoryPerSessionAndItem ./session).
// It fails when a figure passes a bound two to three times what was
// measured when it was written (230 and 470 bytes per session, 25 KB and
// 1 KB per item), so a change that makes them markedly heavier is noticed.
//
//   - sessions of 2 clicks and of 20 (the default --window: a full
//     window) over 100 items whose rows fill at once, so what grows is
//     the tracker;
//   - items whose neighbour rows have filled: 1,000 items in sessions of
//     20 uniform clicks, 400 clicks per item (fewer at the smaller
//     scales), so each item's iknn and sr rows reach their cap (200, cut
//     back at 400) and its markov row most of the way; and items clicked
//     once (a new item's floor).
func TestMemoryPerSessionAndItem(t *testing.T) {
	// The figures in SCALING.md are from WAYMARK_LONG=1 (full sizes,
	// about 40 s for the items and 75 s for the sessions on the loaded
	// build machine); by default a quarter of them, with -short an eighth.
	scale := 4
	switch {
	case os.Getenv("WAYMARK_LONG") != "":
		scale = 1
	case testing.Short():
		scale = 8
	}
	// measure learns events with serve's default models and flush cycle,
	// tracking at most maxSessions sessions (0: the default cap).
	measure := func(t *testing.T, events, maxSessions int, next func(i int) stream.Event) (heap uint64, p *Pipeline) {
		t.Helper()
		o := DefaultEngineOptions()
		if err := o.validate(); err != nil {
			t.Fatal(err)
		}
		if maxSessions > 0 {
			o.Pipeline.Tracker.MaxSessions = maxSessions
		}
		base := liveHeap()
		p, err := NewPipeline(o.Pipeline)
		if err != nil {
			t.Fatal(err)
		}
		kv := &countingKV{}
		for i := 0; i < events; i++ {
			ev := next(i)
			p.Apply(&ev)
			if (i+1)%50_000 == 0 || i+1 == events {
				if err := p.Flush(kv, store.Checkpoint{}); err != nil {
					t.Fatal(err)
				}
			}
		}
		h := liveHeap()
		return h - min(base, h), p
	}
	const ts0 = 1767225600000
	t.Run("sessions", func(t *testing.T) {
		for _, tc := range []struct {
			clicks int
			bound  float64 // bytes per session
		}{{2, 700}, {20, 1400}} {
			n := 40_000 / scale
			// The same items in a first pass of sessions that end before
			// the measured ones start: the rows are then full and the
			// difference is the sessions.
			rng := rand.New(rand.NewPCG(1, 2))
			ev := func(s, i int) stream.Event {
				return stream.Event{Session: "s" + strconv.Itoa(s), Item: "item-" + strconv.Itoa(rng.IntN(100)), TS: ts0 + int64(i)}
			}
			warm := 2_000 * tc.clicks
			hWarm, p := measure(t, warm, 0, func(i int) stream.Event { return ev(-1-i/tc.clicks, i) })
			sWarm := p.Tracker.Len()
			hAll, p := measure(t, warm+n*tc.clicks, 0, func(i int) stream.Event {
				if i < warm {
					return ev(-1-i/tc.clicks, i)
				}
				return ev((i-warm)/tc.clicks, i)
			})
			per := float64(int64(hAll)-int64(hWarm)) / float64(p.Tracker.Len()-sWarm)
			t.Logf("%d-click sessions: %.0f bytes of live heap each (%.1f MiB per 1,000,000)", tc.clicks, per, per*1e6/(1<<20))
			if per > tc.bound {
				t.Errorf("%d-click sessions take %.0f bytes each, bound %.0f", tc.clicks, per, tc.bound)
			}
		}
	})
	t.Run("items", func(t *testing.T) {
		// Items with filled rows, in sessions of 20 clicks with at most
		// 64 tracked (the least recently active evicted), so the heap is
		// the items'. 1,000 items at every scale, so that rows can reach
		// the cap; fewer clicks each at the smaller scales.
		items, perItem := 1000, 400/scale
		rng := rand.New(rand.NewPCG(3, 4))
		h, p := measure(t, items*perItem, 64, func(i int) stream.Event {
			return stream.Event{Session: "s" + strconv.Itoa(i/20), Item: "item-" + strconv.Itoa(rng.IntN(items)), TS: ts0 + int64(i)}
		})
		full := float64(h) / float64(p.Dict.Len())
		t.Logf("items with filled neighbour rows (%d clicks each): %.0f bytes of live heap each (%.1f MiB per 1,000)", perItem, full, full*1000/(1<<20))
		if full > 64<<10 {
			t.Errorf("an item with filled rows takes %.0f bytes, bound 64 KiB", full)
		}
		// Items clicked once, beside one of 16 hot items, in 1,000
		// recurring sessions (as in TestAdversarialIDs).
		n := 100_000 / scale
		sessions := make([]string, 1000)
		for i := range sessions {
			sessions[i] = "r" + strconv.Itoa(i)
		}
		h, p = measure(t, 2*n, 0, func(i int) stream.Event {
			e := stream.Event{Session: sessions[(i/2)%len(sessions)], TS: ts0 + int64(i)}
			if i%2 == 0 {
				e.Item = "new-" + strconv.Itoa(i)
			} else {
				e.Item = "hot-" + strconv.Itoa((i/2)%16)
			}
			return e
		})
		once := float64(h) / float64(p.Dict.Len())
		t.Logf("items clicked once: %.0f bytes of live heap each (%.1f MiB per 1,000,000)", once, once*1e6/(1<<20))
		if once > 4096 {
			t.Errorf("an item clicked once takes %.0f bytes, bound 4 KiB", once)
		}
		runtime.KeepAlive(p)
	})
}
