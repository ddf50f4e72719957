package session

import (
	"encoding/hex"
	"math/rand/v2"
	"os"
	"runtime"
	"strconv"
	"strings"
	"testing"
	"time"

	"waymark/models"
	"waymark/store"
	"waymark/stream"
)

// countingKV takes a flush and keeps only its size, so the pipeline runs
// with serve's flush cycle (dirty marks cleared, released sessions
// dropped) without a store under it.
type countingKV struct {
	sets, deletes int
	bytes         int64
}

func (k *countingKV) Set(key, val []byte) error {
	k.sets++
	k.bytes += int64(len(key) + len(val))
	return nil
}

func (k *countingKV) Delete(key []byte) error {
	k.deletes++
	return nil
}

// adversarialN is how many distinct ids the adversarial test sends:
// 1,000,000 of each kind with WAYMARK_LONG=1; 20,000 with -short; by
// default 200,000 sessions but only 50,000 items, because a stream in
// which every click is a new item is the worst case of the popularity
// top lists (each new item climbs the whole list) and learns at a few
// tens of thousands of events a second instead of the usual million.
func adversarialN(items bool) int {
	switch {
	case os.Getenv("WAYMARK_LONG") != "":
		return 1_000_000
	case testing.Short():
		return 20_000
	case items:
		return 50_000
	}
	return 200_000
}

// randomID returns 32 hex characters from rng: ids with no structure a
// dictionary or a hash could exploit.
func randomID(rng *rand.Rand) string {
	var b [16]byte
	for i := 0; i < 16; i += 8 {
		v := rng.Uint64()
		for j := 0; j < 8; j++ {
			b[i+j] = byte(v >> (8 * j))
		}
	}
	return hex.EncodeToString(b[:])
}

// liveHeap returns the live Go heap after a collection.
func liveHeap() uint64 {
	runtime.GC()
	var ms runtime.MemStats
	runtime.ReadMemStats(&ms)
	return ms.HeapAlloc
}

// vmRSS returns the process's resident set in bytes from /proc (0 where
// there is no /proc).
func vmRSS() uint64 {
	b, err := os.ReadFile("/proc/self/status")
	if err != nil {
		return 0
	}
	for _, l := range strings.Split(string(b), "\n") {
		if v, ok := strings.CutPrefix(l, "VmRSS:"); ok {
			kb, _ := strconv.ParseUint(strings.TrimSpace(strings.TrimSuffix(strings.TrimSpace(v), "kB")), 10, 64)
			return kb << 10
		}
	}
	return 0
}

type adversarialSample struct {
	events, sessions, items int
	heap, rss               uint64
}

// TestAdversarialIDs sends n distinct random ids through the learning
// path with serve's default models and flush cycle, in two shapes:
//
//   - distinct sessions: n sessions of two clicks each over a catalogue of
//     100 items, with --max-sessions at n/5. The tracker must never hold
//     more than the cap, and the live heap must stop growing once the cap
//     is reached: 100 items fill their neighbour rows (99 entries, under
//     the cap of 200) within the first fifth, so sessions are all that
//     could still grow.
//   - distinct items: n new items, each clicked once in one of 1,000
//     recurring sessions beside one of 16 hot items. Neighbour lists must
//     stay within the per-item cap (the hot items are co-visited with
//     n/16 distinct items each), but the item dictionary and the per-item
//     rows grow with every new id: nothing caps them. The test measures
//     that growth per item and fails only if it exceeds 4 KiB, which
//     would mean something is kept per event rather than per item.
//
// The figures go to the test log (go test -v -run TestAdversarialIDs);
// bench/RESULTS.md records a run with WAYMARK_LONG=1.
func TestAdversarialIDs(t *testing.T) {
	capSessions := max(64, adversarialN(false)/5/64*64) // a multiple of the tracker's 64 shards
	tests := []struct {
		name string
		n    int
		// setup returns the generator of the i-th event of 2n.
		setup func(rng *rand.Rand, n int) func(i int) stream.Event
		check func(t *testing.T, p *Pipeline, n int, samples []adversarialSample)
	}{
		{
			name: "distinct sessions",
			n:    adversarialN(false),
			setup: func(rng *rand.Rand, n int) func(i int) stream.Event {
				var cur string
				return func(i int) stream.Event {
					if i%2 == 0 {
						cur = randomID(rng)
					}
					return stream.Event{Session: cur, Item: "item-" + strconv.Itoa(rng.IntN(100)), TS: 1767225600000 + int64(i)}
				}
			},
			check: func(t *testing.T, p *Pipeline, n int, samples []adversarialSample) {
				for _, s := range samples {
					if s.sessions > capSessions {
						t.Errorf("after %d events the tracker holds %d sessions, cap %d", s.events, s.sessions, capSessions)
					}
				}
				// From 40 % on the cap is full: the heap must plateau.
				first, last := samples[1], samples[len(samples)-1]
				t.Logf("live heap per tracked session (two clicks, 32-byte id), neighbour rows included: %.0f bytes", float64(last.heap)/float64(last.sessions))
				if grow := int64(last.heap) - int64(first.heap); grow > int64(first.heap)/10+(4<<20) {
					t.Errorf("live heap grew by %d bytes between %d and %d events with the session cap full (%d → %d)",
						grow, first.events, last.events, first.heap, last.heap)
				}
			},
		},
		{
			name: "distinct items",
			n:    adversarialN(true),
			setup: func(rng *rand.Rand, n int) func(i int) stream.Event {
				sessions := make([]string, 1000)
				for i := range sessions {
					sessions[i] = randomID(rng)
				}
				return func(i int) stream.Event {
					ev := stream.Event{Session: sessions[(i/2)%len(sessions)], TS: 1767225600000 + int64(i)}
					if i%2 == 0 {
						ev.Item = randomID(rng)
					} else {
						ev.Item = "hot-" + strconv.Itoa((i/2)%16)
					}
					return ev
				}
			},
			check: func(t *testing.T, p *Pipeline, n int, samples []adversarialSample) {
				if got := p.Dict.Len(); got != n+16 {
					t.Errorf("dictionary holds %d items, %d were sent", got, n+16)
				}
				im, err := p.Set.Get("iknn")
				if err != nil {
					t.Fatal(err)
				}
				capRow := p.Options().Set.CapPerItem
				for h := 0; h < 16; h++ {
					id, ok := p.Dict.Lookup("hot-" + strconv.Itoa(h))
					if !ok {
						t.Fatalf("hot-%d unknown", h)
					}
					// A row is cut back to the cap when it passes twice the cap.
					ns := im.(*models.IKNN).Neighbors(id, 10*capRow, p.Checkpoint().Watermark)
					if len(ns) > 2*capRow || len(ns) < capRow {
						t.Errorf("hot-%d has %d neighbours after %d distinct co-visitors, cap %d (pruned at %d)", h, len(ns), n/16, capRow, 2*capRow)
					}
				}
				first, last := samples[0], samples[len(samples)-1]
				perItem := float64(int64(last.heap)-int64(first.heap)) / float64(last.items-first.items)
				t.Logf("live heap per distinct item: %.0f bytes (nothing caps the item count)", perItem)
				if perItem > 4096 {
					t.Errorf("live heap grows by %.0f bytes per distinct item, above 4 KiB", perItem)
				}
			},
		},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			o := DefaultEngineOptions()
			if err := o.validate(); err != nil {
				t.Fatal(err)
			}
			po := o.Pipeline
			po.Tracker.MaxSessions = capSessions
			base := liveHeap()
			p, err := NewPipeline(po)
			if err != nil {
				t.Fatal(err)
			}
			n := tt.n
			next := tt.setup(rand.New(rand.NewPCG(uint64(n), 5)), n)
			kv := &countingKV{}
			var samples []adversarialSample
			var learning time.Duration // wall time of Apply and Flush, for the log only
			total := 2 * n
			for i := 0; i < total; i++ {
				t0 := time.Now()
				ev := next(i)
				p.Apply(&ev)
				if (i+1)%50_000 == 0 || i+1 == total {
					if err := p.Flush(kv, store.Checkpoint{}); err != nil {
						t.Fatal(err)
					}
				}
				learning += time.Since(t0)
				if (i+1)%(total/5) == 0 {
					h := liveHeap()
					samples = append(samples, adversarialSample{
						events: i + 1, sessions: p.Tracker.Len(), items: p.Dict.Len(),
						heap: h - min(base, h), rss: vmRSS(),
					})
				}
			}
			t.Logf("%s: %d events, session cap %d, neighbour cap %d, flushed %d sets, %d deletes, %d MiB; learned at %.0f events/s",
				tt.name, total, capSessions, po.Set.CapPerItem, kv.sets, kv.deletes, kv.bytes>>20, float64(total)/learning.Seconds())
			t.Logf("%10s %10s %10s %12s %10s", "events", "sessions", "items", "heap MiB", "RSS MiB")
			for _, s := range samples {
				t.Logf("%10d %10d %10d %12.1f %10.1f", s.events, s.sessions, s.items, float64(s.heap)/(1<<20), float64(s.rss)/(1<<20))
			}
			tt.check(t, p, n, samples)
			runtime.KeepAlive(p)
		})
	}
}
