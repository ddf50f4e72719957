package session

import (
	"testing"
	"time"

	"waymark/models"
)

func TestTrackerWindowTimeoutAndEviction(t *testing.T) {
	tr, err := NewTracker(TrackerOptions{Window: 3, Timeout: 30 * time.Minute, MaxSessions: numShards})
	if err != nil {
		t.Fatal(err)
	}
	var no uint64
	next := func() uint64 { no++; return no }
	var touch uint64
	click := func(s string, item models.ItemID, ts int64) Click {
		touch++
		return tr.Observe(s, item, ts, touch, next, nil)
	}
	min := int64(60_000)
	c := click("a", 1, 0)
	if !c.New || len(c.Window) != 0 {
		t.Fatalf("first click: %+v", c)
	}
	click("a", 2, 1*min)
	c = click("a", 2, 2*min) // consecutive repeat
	if !c.Repeat || len(c.Window) != 2 {
		t.Fatalf("repeat: %+v", c)
	}
	click("a", 3, 3*min)
	c = click("a", 4, 4*min)
	// window of 3 holds the last three distinct-consecutive clicks before 4
	if got := items(c.Window); len(got) != 3 || got[0] != 1 || got[2] != 3 {
		t.Fatalf("window before 4 = %v", got)
	}
	c = click("a", 5, 4*min+31*min) // 31 minutes later: a new session
	if !c.New || len(c.Window) != 0 || c.No == 1 {
		t.Fatalf("after timeout: %+v", c)
	}
	if tr.Delete("a") != true || tr.Delete("a") != false {
		t.Fatal("delete should report the session once")
	}
	// Expire releases sessions idle for longer than the timeout.
	click("b", 1, 0)
	click("c", 1, 40*min)
	if n := tr.Expire(40 * min); n != 1 || tr.Len() != 1 {
		t.Fatalf("expired %d, %d left; want 1, 1", n, tr.Len())
	}
}

func TestTrackerCapEvictsLeastRecent(t *testing.T) {
	// One session per shard at most: a second session in the same shard
	// evicts the first.
	tr, _ := NewTracker(TrackerOptions{MaxSessions: numShards})
	var no, touch uint64
	next := func() uint64 { no++; return no }
	keys := []string{}
	target := tr.shardFor("s0")
	for i := 0; len(keys) < 2; i++ {
		k := "s" + string(rune('0'+i%10)) + string(rune('a'+i/10))
		if tr.shardFor(k) == target {
			keys = append(keys, k)
		}
	}
	touch++
	tr.Observe(keys[0], 1, 1, touch, next, nil)
	touch++
	tr.Observe(keys[1], 1, 2, touch, next, nil)
	if _, _, ok := tr.Window(keys[0], 0, nil); ok {
		t.Fatal("the older session should have been evicted")
	}
	if _, _, ok := tr.Window(keys[1], 0, nil); !ok {
		t.Fatal("the newer session should be tracked")
	}
}

func items(w []models.Step) []models.ItemID {
	out := make([]models.ItemID, len(w))
	for i, s := range w {
		out[i] = s.Item
	}
	return out
}
