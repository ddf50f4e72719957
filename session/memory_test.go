package session

import (
	"math/rand/v2"
	"runtime"
	"strconv"
	"testing"

	"waymark/store"
	"waymark/stream"
)

// TestMemoryPerSessionAndItem measures the live Go heap a tracked session
// and an item cost with serve's default models and flush cycle, the
// figures deploy/SCALING.md sizes a replica's memory budget with
// (go test -v -run TestMemoryPerSessionAndItem ./session). It fails when a
// figure passes a bound twice what was measured when it was written, so a
// change that makes sessions or items markedly heavier is noticed.
//
//   - sessions of 2 clicks and of 20 (the default --window: a full
//     window) over 100 items whose rows fill at once, so what grows is
//     the tracker;
//   - items whose neighbour rows have filled: 1,000 items in sessions of
//     20 uniform clicks, 400 clicks per item, so each item's iknn and sr
//     rows reach their cap (200, cut back at 400) and its markov row most
//     of the way; and items clicked once (a new item's floor).
func TestMemoryPerSessionAndItem(t *testing.T) {
	scale := 1
	if testing.Short() {
		scale = 4
	}
	measure := func(t *testing.T, events int, next func(i int) stream.Event) (heap uint64, p *Pipeline) {
		t.Helper()
		o := DefaultEngineOptions()
		if err := o.validate(); err != nil {
			t.Fatal(err)
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
			hWarm, p := measure(t, warm, func(i int) stream.Event { return ev(-1-i/tc.clicks, i) })
			sWarm := p.Tracker.Len()
			hAll, p := measure(t, warm+n*tc.clicks, func(i int) stream.Event {
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
		// Items with filled rows. Few sessions are tracked at the end
		// (sessions of 20 clicks, tracker capped at 1,000), so the heap
		// is the items'.
		items, perItem := 1000/scale, 400
		rng := rand.New(rand.NewPCG(3, 4))
		events := items * perItem
		o := DefaultEngineOptions()
		_ = o.validate()
		h, p := measure(t, events, func(i int) stream.Event {
			return stream.Event{Session: "s" + strconv.Itoa(i/20%1000) + "-" + strconv.Itoa(i/20/1000), Item: "item-" + strconv.Itoa(rng.IntN(items)), TS: ts0 + int64(i)}
		})
		sessBytes := uint64(p.Tracker.Len()) * 1400 // at most the 20-click bound above
		full := float64(h-min(h, sessBytes)) / float64(p.Dict.Len())
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
		h, p = measure(t, 2*n, func(i int) stream.Event {
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
