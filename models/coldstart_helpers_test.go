package models

import (
	"fmt"
	"math/rand/v2"
	"slices"
	"sort"
	"strings"
	"testing"
	"time"
)

// memKV is an in-memory KV with a prefix scan in key order, standing in for
// the store's transaction in unit tests of models (the store has its own
// tests on Badger).
type memKV struct {
	m    map[string][]byte
	sets int
	dels int
}

func newMemKV() *memKV { return &memKV{m: map[string][]byte{}} }

func (kv *memKV) Set(k, v []byte) error {
	kv.m[string(k)] = append([]byte(nil), v...)
	kv.sets++
	return nil
}

func (kv *memKV) Delete(k []byte) error {
	delete(kv.m, string(k))
	kv.dels++
	return nil
}

func (kv *memKV) scan(prefix string, f func(k, v []byte) error) error {
	keys := make([]string, 0, len(kv.m))
	for k := range kv.m {
		if strings.HasPrefix(k, prefix) {
			keys = append(keys, k)
		}
	}
	sort.Strings(keys)
	for _, k := range keys {
		if err := f([]byte(k), kv.m[k]); err != nil {
			return err
		}
	}
	return nil
}

// csEvent is a click (Session != "") or a catalogue record.
type csEvent struct {
	Session string
	Item    ItemID
	TS      int64
	Info    *ItemInfo
	// Prior, when set, is an imported neighbour list for Item.
	Prior []Scored
}

// csDriver plays events into a Set the way the pipeline does: session
// numbers in order of first click, a window of the last 20 distinct
// clicks, landmark weights from a decay whose reference is the first
// click, records to every CatalogLearner.
type csDriver struct {
	set      *Set
	learners []Model
	decay    Decay
	started  bool
	nos      map[string]uint64
	wins     map[string][]Step
	nextNo   uint64
	clicks   uint64
}

const csHalfLife = 7 * 24 * time.Hour

func newCSDriver(s *Set) *csDriver {
	s.Catalog()
	d := &csDriver{set: s, learners: s.Learners(), nos: map[string]uint64{}, wins: map[string][]Step{}}
	for i, m := range d.learners {
		if p, ok := m.(Persistent); ok {
			p.SetPrefix("m/" + s.Keys()[i] + "/")
		}
	}
	return d
}

func (d *csDriver) setDecay(ref int64) {
	d.decay = NewDecay(csHalfLife, ref)
	d.started = true
	for _, m := range d.learners {
		if da, ok := m.(DecayAware); ok {
			da.SetDecay(d.decay)
		}
	}
}

func (d *csDriver) play(evs []csEvent) {
	for i := range evs {
		d.apply(&evs[i])
	}
}

func (d *csDriver) apply(ev *csEvent) {
	if ev.Prior != nil {
		for _, m := range d.learners {
			if p, ok := m.(PriorLearner); ok {
				p.ObservePrior(ev.Item, ev.Prior)
			}
		}
		return
	}
	if ev.Info != nil {
		for _, m := range d.learners {
			if c, ok := m.(CatalogLearner); ok {
				c.ObserveItem(ev.Info)
			}
		}
		return
	}
	if !d.started {
		d.setDecay(ev.TS)
	}
	no, ok := d.nos[ev.Session]
	if !ok {
		d.nextNo++
		no = d.nextNo
		d.nos[ev.Session] = no
	}
	win := d.wins[ev.Session]
	o := Observation{Window: win, Item: ev.Item, TS: ev.TS, SessionNo: no, SessionHash: HashSession(ev.Session), Weight: d.decay.Weight(ev.TS)}
	o.Repeat = len(win) > 0 && win[len(win)-1].Item == ev.Item
	for _, m := range d.learners {
		m.Observe(&o)
	}
	if !o.Repeat {
		win = append(win, Step{Item: ev.Item, TS: ev.TS})
		if len(win) > 20 {
			win = win[1:]
		}
		d.wins[ev.Session] = win
	}
	// Every fifth click the session is served two fresh items, as the
	// service's exploration slot would, so impressions and credited
	// clicks are part of the stream.
	d.clicks++
	if d.clicks%5 == 0 {
		for _, m := range d.learners {
			if f, ok := m.(*Fresh); ok {
				q := &Query{Session: win, Now: ev.TS, SessionNo: no}
				var ids []ItemID
				for _, p := range f.Pick(q, 2, NewExploreRand(42, d.clicks), nil, nil) {
					ids = append(ids, p.Item)
				}
				f.Served(no, ids, ev.TS)
			}
		}
	}
}

// flush writes every persistent learner into kv.
func (d *csDriver) flush(t testing.TB, kv *memKV) {
	t.Helper()
	for _, m := range d.learners {
		if p, ok := m.(Persistent); ok {
			if err := p.Flush(kv); err != nil {
				t.Fatalf("flush %s: %v", p.Prefix(), err)
			}
		}
	}
}

// load restores every persistent learner from kv, then sets the decay the
// pipeline would restore from its checkpoint.
func (d *csDriver) load(t testing.TB, kv *memKV, ref int64) {
	t.Helper()
	for _, m := range d.learners {
		if p, ok := m.(Persistent); ok {
			if err := kv.scan(p.Prefix(), p.Load); err != nil {
				t.Fatalf("load %s: %v", p.Prefix(), err)
			}
		}
	}
	d.setDecay(ref)
}

// query builds a query from items at now, for tracked session no (0: sent
// by the caller).
func csQuery(now int64, no uint64, items ...ItemID) *Query {
	q := &Query{Now: now, SessionNo: no}
	for _, it := range items {
		q.Session = append(q.Session, Step{Item: it, TS: now})
	}
	return q
}

// csCategory is one category of the invented shop.
type csCategory struct {
	path  string
	tags  []string
	words []string
}

// csCategories is an invented garden-and-kitchen shop: four categories of
// twelve items, each item titled from its category's words plus one of its
// own.
func csCategories() []csCategory {
	return []csCategory{
		{"garden/tools", []string{"steel", "handle"}, []string{"spade", "rake", "hoe", "trowel", "fork", "shears"}},
		{"garden/seeds", []string{"organic", "packet"}, []string{"tomato", "basil", "carrot", "pea", "bean", "radish"}},
		{"kitchen/knives", []string{"steel", "blade"}, []string{"chef", "paring", "bread", "carving", "utility", "boning"}},
		{"kitchen/pans", []string{"nonstick", "lid"}, []string{"frying", "saute", "sauce", "grill", "wok", "stock"}},
	}
}

const csPerCategory = 12

// csItemInfo returns the record of item id (category id/12), published at
// ts.
func csItemInfo(id ItemID, ts int64) *ItemInfo {
	cats := csCategories()
	c := cats[int(id)/csPerCategory%len(cats)]
	w := c.words[int(id)%len(c.words)]
	size := []string{"small", "large"}[int(id)/len(c.words)%2]
	return &ItemInfo{
		Item: id,
		Attrs: map[string][]string{
			"category": {c.path},
			"tags":     append(slices.Clone(c.tags), w),
			"title":    {fmt.Sprintf("%s %s %s", size, w, strings.Split(c.path, "/")[1])},
			"colour":   {[]string{"green", "red", "black"}[int(id)%3]},
		},
		Available: true,
		TS:        ts,
		Vector:    csVector(id),
	}
}

// csVector gives even items an 8-dimensional vector near their category's
// axis, as an embedding computed elsewhere would; odd items have none.
func csVector(id ItemID) []float32 {
	if id%2 == 1 {
		return nil
	}
	v := make([]float32, 8)
	v[int(id)/csPerCategory%4] = 1
	v[4+int(id)%4] = 0.3
	return v
}

// csWorld is a generated stream: records for the 48 catalogue items, then
// interleaved sessions that mostly stay within one category, a few
// unavailable items, and 8 new items (48..55) whose records arrive
// mid-stream, some never clicked.
type csWorld struct {
	events      []csEvent
	unavailable []ItemID
	start, end  int64
	newItems    []ItemID
}

func newCSWorld(seed uint64, sessions int) *csWorld {
	rng := rand.New(rand.NewPCG(seed, 7))
	w := &csWorld{start: 1_767_225_600_000, unavailable: []ItemID{5, 17}}
	for id := ItemID(0); id < 48; id++ {
		w.events = append(w.events, csEvent{Info: csItemInfo(id, w.start)})
	}
	// Priors from another site for the first items: each item's next two.
	for id := ItemID(0); id < 60; id++ {
		w.events = append(w.events, csEvent{Item: id, Prior: []Scored{{id + 1, 1}, {id + 2, 0.5}}})
	}
	for _, id := range w.unavailable {
		info := csItemInfo(id, w.start)
		info.Available = false
		w.events = append(w.events, csEvent{Info: info})
	}
	type click struct {
		s  string
		it ItemID
		ts int64
	}
	var clicks []click
	for s := range sessions {
		cat := rng.IntN(len(csCategories()))
		ts := w.start + int64(s)*40_000 + rng.Int64N(30_000)
		n := 2 + rng.IntN(5)
		for range n {
			var it ItemID
			if rng.Float64() < 0.85 {
				it = ItemID(cat*csPerCategory + rng.IntN(csPerCategory))
			} else {
				it = ItemID(rng.IntN(48))
			}
			// late sessions click some of the new items
			if s > sessions*3/4 && rng.Float64() < 0.15 {
				it = ItemID(48 + rng.IntN(4))
			}
			clicks = append(clicks, click{fmt.Sprintf("v%d", s), it, ts})
			ts += 5_000 + rng.Int64N(20_000)
		}
	}
	slices.SortStableFunc(clicks, func(a, b click) int { return int(a.ts - b.ts) })
	mid := clicks[len(clicks)/2].ts
	inserted := false
	for _, c := range clicks {
		if !inserted && c.ts >= mid {
			for id := ItemID(48); id < 56; id++ {
				info := csItemInfo(id%48, mid)
				info.Item = id
				info.Published = mid
				w.events = append(w.events, csEvent{Info: info})
				w.newItems = append(w.newItems, id)
			}
			inserted = true
		}
		w.events = append(w.events, csEvent{Session: c.s, Item: c.it, TS: c.ts})
		w.end = c.ts
	}
	return w
}
