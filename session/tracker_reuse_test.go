package session

import (
	"math/rand/v2"
	"slices"
	"strconv"
	"testing"
	"time"

	"waymark/models"
)

// mapKV keeps a flush's writes in a map, so a test can reload them.
type mapKV map[string][]byte

func (m mapKV) Set(key, val []byte) error { m[string(key)] = slices.Clone(val); return nil }
func (m mapKV) Delete(key []byte) error   { delete(m, string(key)); return nil }

// refSession is the plain bookkeeping the tracker must agree with.
type refSession struct {
	items []models.ItemID
	last  int64
}

// TestTrackerReusesEntriesExactly drives sessions that end by timeout,
// expiry and deletion, so removed entries are reused for new sessions,
// and checks every window against a plain map of slices, and the store
// written by periodic flushes against the live tracker.
func TestTrackerReusesEntriesExactly(t *testing.T) {
	const window = 4
	timeout := 10 * time.Second
	tests := []struct {
		name    string
		persist bool
	}{{"no flush", false}, {"flushed", true}}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			tr, err := NewTracker(TrackerOptions{Window: window, Timeout: timeout, MaxSessions: 1 << 20})
			if err != nil {
				t.Fatal(err)
			}
			if tt.persist {
				tr.Persist()
			}
			kv := mapKV{}
			ref := map[string]*refSession{}
			rng := rand.New(rand.NewPCG(7, 8))
			var no, touch uint64
			next := func() uint64 { no++; return no }
			var ts int64
			for step := 0; step < 20000; step++ {
				ts += int64(rng.IntN(40))
				key := "s" + strconv.Itoa(rng.IntN(300))
				switch r := rng.IntN(100); {
				case r < 2:
					_, tracked := ref[key]
					if got := tr.Delete(key); got != tracked {
						t.Fatalf("step %d: Delete(%s) = %v, want %v", step, key, got, tracked)
					}
					delete(ref, key)
					continue
				case r < 3:
					cutoff := ts - timeout.Milliseconds()
					tr.Expire(ts)
					for k, s := range ref {
						if s.last < cutoff {
							delete(ref, k)
						}
					}
					continue
				case r < 5 && tt.persist:
					if err := tr.Flush(kv); err != nil {
						t.Fatal(err)
					}
					continue
				}
				item := models.ItemID(rng.IntN(6))
				touch++
				c := tr.Observe(key, item, ts, touch, next, nil)
				s := ref[key]
				if s != nil && ts-s.last > timeout.Milliseconds() {
					s = nil
				}
				if s == nil {
					s = &refSession{}
					ref[key] = s
				}
				if !slices.Equal(items(c.Window), s.items) {
					t.Fatalf("step %d: window of %s = %v, want %v", step, key, items(c.Window), s.items)
				}
				if n := len(s.items); n > 0 && s.items[n-1] == item {
					// a consecutive repeat leaves the window as it is
				} else {
					s.items = append(s.items, item)
					if len(s.items) > window {
						s.items = s.items[1:]
					}
				}
				s.last = max(s.last, ts)
			}
			if tr.Len() != len(ref) {
				t.Fatalf("tracker holds %d sessions, reference %d", tr.Len(), len(ref))
			}
			if !tt.persist {
				return
			}
			if err := tr.Flush(kv); err != nil {
				t.Fatal(err)
			}
			back, _ := NewTracker(TrackerOptions{Window: window, Timeout: timeout, MaxSessions: 1 << 20})
			for k, v := range kv {
				if err := back.Load([]byte(k), v); err != nil {
					t.Fatal(err)
				}
			}
			back.Loaded()
			if back.Len() != len(ref) {
				t.Fatalf("store holds %d sessions, reference %d", back.Len(), len(ref))
			}
			for k, s := range ref {
				got, _, ok := back.Window(k, 0, nil)
				if !ok || !slices.Equal(items(got), s.items) {
					t.Fatalf("stored window of %s = %v (%v), want %v", k, items(got), ok, s.items)
				}
			}
		})
	}
}
