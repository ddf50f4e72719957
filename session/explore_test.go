package session

import (
	"fmt"
	"sync"
	"testing"
	"time"
)

// TestExplorationSlot: the last slot of an answer goes to a fresh item by
// Thompson sampling, the impression reaches every replica through the log,
// and the session's later click on it counts as a success.
func TestExplorationSlot(t *testing.T) {
	// Items stay fresh for 3 minutes of event time (0.05 h) here, and
	// impressions do not extend that.
	const fresh = "fresh(window=0.05,min_impressions=0)"
	s := newTestService(t, t.TempDir(), func(o *ServiceOptions) { o.Engine.ExploreSeed, o.Engine.Fresh = 7, fresh })
	defer shutdown(t, s)
	base := "http://" + s.HTTPAddr()
	// Add an item nobody else co-visits, so the blend alone would not show
	// it to q1, ten minutes after the others: only E is fresh.
	events := workedEvents() + `{"session":"lone","item":"E","ts":1767226200000}` + "\n"
	doJSON(t, "POST", base+"/v1/events", events, nil)
	waitFor(t, "events applied", 20*time.Second, func() bool { return s.Engine().Stats().EventsApplied == 172 })
	var res NextResult
	doJSON(t, "GET", base+"/v1/sessions/q1/next?k=3", "", &res)
	if len(res.Items) != 3 || res.Items[0].Item != "B" || res.Items[0].Explore {
		t.Fatalf("the best answer must stay first: %+v", res)
	}
	last := res.Items[2]
	if !last.Explore || res.Request == "" {
		t.Fatalf("the last of 3 slots should be an exploration slot with a request id: %+v", res)
	}
	e := s.Engine()
	id, _ := e.p.Dict.Lookup(last.Item)
	waitFor(t, "the impression applied from the log", 10*time.Second, func() bool {
		e.mu.RLock()
		defer e.mu.RUnlock()
		imps, _ := e.fresh.Stats(id)
		return imps == 1
	})
	if last.Item != "E" {
		t.Fatalf("the only fresh item is E, the slot got %s", last.Item)
	}
	click := fmt.Sprintf(`{"session":"q1","item":%q,"ts":1767226210000}`, last.Item)
	doJSON(t, "POST", base+"/v1/events", click, nil)
	waitFor(t, "the click credited", 10*time.Second, func() bool {
		e.mu.RLock()
		defer e.mu.RUnlock()
		_, clicks := e.fresh.Stats(id)
		return clicks == 1
	})
	// A burst of answers: their records share served_batch messages on
	// the log, and every impression arrives exactly once.
	const burst = 60
	var wg sync.WaitGroup
	shown := make(chan bool, burst)
	for range burst {
		wg.Add(1)
		go func() {
			defer wg.Done()
			var r NextResult
			doJSON(t, "POST", base+"/v1/next", `{"items":["A"],"k":3}`, &r)
			for _, it := range r.Items {
				if it.Item == "E" && it.Fresh {
					shown <- true
				}
			}
		}()
	}
	wg.Wait()
	close(shown)
	n := 0
	for range shown {
		n++
	}
	if n == 0 {
		t.Fatal("no answer of the burst showed the fresh item")
	}
	waitFor(t, "the burst's impressions applied", 10*time.Second, func() bool {
		e.mu.RLock()
		defer e.mu.RUnlock()
		imps, _ := e.fresh.Stats(id)
		return imps == 1+n
	})
	time.Sleep(100 * time.Millisecond) // no record is applied twice
	e.mu.RLock()
	imps, _ := e.fresh.Stats(id)
	e.mu.RUnlock()
	if imps != 1+n {
		t.Fatalf("impressions %d after the burst, want %d", imps, 1+n)
	}
	// Off means off.
	s2 := newTestService(t, t.TempDir(), func(o *ServiceOptions) { o.Engine.ExploreEvery, o.Engine.Fresh = 0, fresh })
	defer shutdown(t, s2)
	doJSON(t, "POST", "http://"+s2.HTTPAddr()+"/v1/events", events, nil)
	waitFor(t, "events applied", 20*time.Second, func() bool { return s2.Engine().Stats().EventsApplied == 172 })
	var off NextResult
	doJSON(t, "GET", "http://"+s2.HTTPAddr()+"/v1/sessions/q1/next?k=3", "", &off)
	for _, it := range off.Items {
		if it.Explore {
			t.Fatalf("exploration is off but %s came from it", it.Item)
		}
	}
}
