package models

import (
	"math"
	"slices"
	"testing"
	"time"
)

func newTestTrending(t *testing.T, o TrendingOptions, cat *Catalog) *Trending {
	t.Helper()
	m, err := NewTrending(o, cat)
	if err != nil {
		t.Fatal(err)
	}
	return m
}

// directRate is the definition, summed directly rather than in landmark
// form: the decayed count at now under half-life h, times ln2/h, per hour.
func directRate(clicks []int64, now int64, h time.Duration) float64 {
	s := 0.0
	for _, ts := range clicks {
		s += math.Exp2(-float64(now-ts) / float64(h.Milliseconds()))
	}
	return s * math.Ln2 / h.Hours()
}

// An item clicked steadily does not trend; one whose clicks picked up
// lately does, and the scores follow rate_short - rate_long computed
// directly. The short half-life is short enough that the model moves its
// own reference many times on the way.
func TestTrendingWorked(t *testing.T) {
	o := TrendingOptions{Short: 2 * time.Minute, Long: 2 * time.Hour}
	m := newTestTrending(t, o, nil)
	const steady, rising, fading = 0, 1, 2
	t0 := int64(1_767_225_600_000)
	clicks := map[ItemID][]int64{}
	click := func(id ItemID, ts int64) {
		m.Observe(&Observation{Item: id, TS: ts})
		clicks[id] = append(clicks[id], ts)
	}
	const minute = 60_000
	end := t0 + 20*60*minute // 20 h: 600 short half-lives
	for ts := t0; ts < end; ts += minute {
		click(steady, ts)
		if ts > end-30*minute {
			click(rising, ts)
			click(rising, ts+30_000)
		}
		if ts < end-5*60*minute && (ts-t0)%(2*minute) == 0 {
			click(fading, ts)
		}
	}
	if m.refS <= t0 {
		t.Fatalf("the short reference never moved (refS %d)", m.refS)
	}
	now := end
	trend := map[ItemID]float64{}
	for id, cs := range clicks {
		trend[id] = directRate(cs, now, o.Short) - directRate(cs, now, o.Long)
	}
	got := m.Trend(nil, 3, now, nil)
	if len(got) == 0 || got[0].Item != rising {
		t.Fatalf("trending %v, want the rising item first (direct trends %v)", got, trend)
	}
	for _, s := range got {
		want := trend[s.Item] / trend[rising]
		if trend[s.Item] <= 0 {
			want = 0 // not above baseline: only the global fallback scale
		}
		if want > 0 && math.Abs(s.Score-want) > 1e-9 {
			t.Errorf("item %d scores %.12f, want %.12f", s.Item, s.Score, want)
		}
		if want == 0 && s.Score > fallbackScale {
			t.Errorf("item %d below its baseline scores %g", s.Item, s.Score)
		}
	}
	if trend[steady] > 0.05*trend[rising] {
		t.Errorf("the steady item trends at %g against %g", trend[steady], trend[rising])
	}
	// Popularity under the long half-life: the steady item leads.
	if pop := m.Popular(nil, 1, now, nil); len(pop) != 1 || pop[0].Item != steady {
		t.Errorf("popular %v, want the steady item", pop)
	}
	for _, v := range m.ctxs[0].counts {
		if math.IsInf(v[0], 0) || math.IsNaN(v[0]) || math.IsInf(v[1], 0) {
			t.Fatalf("a count overflowed: %v", v)
		}
	}
}

// Contexts: category contexts come from records, others from
// ObserveContext; a context's answers come first and global popularity
// fills the rest; an unknown context falls back to global.
func TestTrendingContexts(t *testing.T) {
	cat := NewCatalog()
	m := newTestTrending(t, DefaultTrendingOptions(), cat)
	t0 := int64(1_767_225_600_000)
	rec := func(id ItemID, path string, avail bool) {
		info := &ItemInfo{Item: id, Attrs: map[string][]string{"category": {path}}, Available: avail, TS: t0}
		m.ObserveItem(info)
		cat.ObserveItem(info)
	}
	rec(0, "garden/tools", true)
	rec(1, "garden/seeds", true)
	rec(2, "kitchen/pans", true)
	rec(3, "garden/tools", false)
	n := map[ItemID]int{0: 3, 1: 2, 2: 9, 3: 5}
	ts := t0
	for id, k := range n {
		for range k {
			ts += 1000
			m.Observe(&Observation{Item: id, TS: ts})
		}
	}
	ts += 1000
	m.ObserveContext("locale=fr", 1, ts)
	ids := func(sc []Scored) []ItemID {
		var out []ItemID
		for _, s := range sc {
			out = append(out, s.Item)
		}
		return out
	}
	tests := []struct {
		keys []string
		want []ItemID
	}{
		{[]string{"category=garden"}, []ItemID{0, 1, 2}},       // garden first (3 unavailable), kitchen fills
		{[]string{"category=garden/seeds"}, []ItemID{1, 2, 0}}, // then global order
		{[]string{"locale=fr"}, []ItemID{1, 2, 0}},
		{[]string{"locale=xx"}, []ItemID{2, 0, 1}}, // unknown: global
		{nil, []ItemID{2, 0, 1}},
	}
	for _, tt := range tests {
		if got := ids(m.Popular(tt.keys, 3, ts, nil)); !slices.Equal(got, tt.want) {
			t.Errorf("Popular(%v) = %v, want %v", tt.keys, got, tt.want)
		}
	}
	if got := ids(m.TopIn("category=garden", 5, nil)); !slices.Equal(got, []ItemID{0, 1}) {
		t.Errorf("TopIn(garden) = %v", got)
	}
	if m.Contexts() != 1+5+1 { // global, garden, garden/tools, garden/seeds, kitchen, kitchen/pans, locale=fr
		t.Errorf("%d contexts", m.Contexts())
	}
}

// Declared preferences become the session's earliest clicks.
func TestSeedQuery(t *testing.T) {
	s := NewSet(DefaultSetOptions())
	for _, spec := range []string{"trending", "content"} {
		if _, err := s.Get(spec); err != nil {
			t.Fatal(err)
		}
	}
	d := newCSDriver(s)
	w := newCSWorld(1, 200)
	d.play(w.events)
	now := w.end
	real := csQuery(now, 0, 40, 41)
	got := s.SeedQuery(*real, Preferences{Categories: []string{"Garden > Seeds"}, Items: []ItemID{17, 30, 41}}, 2)
	var items []ItemID
	for _, st := range got.Session {
		items = append(items, st.Item)
	}
	// the two most popular available seeds items, then item 30 (17 is
	// unavailable, 41 already clicked), then the real clicks
	tr := mustTrending(t, s)
	top := tr.TopIn("category=garden/seeds", 2, nil)
	want := []ItemID{top[0].Item, top[1].Item, 30, 40, 41}
	if !slices.Equal(items, want) {
		t.Errorf("seeded session %v, want %v", items, want)
	}
	for _, id := range items[:2] {
		if !s.Catalog().InCategory(id, "garden/seeds") {
			t.Errorf("seed %d is not in garden/seeds", id)
		}
	}
	if got.Session[0].TS != real.Session[0].TS {
		t.Errorf("pseudo-click at %d, want the first real click's time", got.Session[0].TS)
	}
	// An empty session with a category no click has reached yet gets its
	// newest items from the content model.
	empty := s.SeedQuery(Query{Now: now}, Preferences{Categories: []string{"kitchen/pans"}}, 3)
	if len(empty.Session) != 3 {
		t.Fatalf("seeded empty session %v", empty.Session)
	}
	for _, st := range empty.Session {
		if !s.Catalog().InCategory(st.Item, "kitchen") {
			t.Errorf("seed %d is not a kitchen item", st.Item)
		}
	}
	many := s.SeedQuery(Query{Now: now}, Preferences{Items: []ItemID{0, 1, 2, 3, 4, 6, 7, 8, 9, 10, 11, 12, 13}}, 0)
	if len(many.Session) != MaxSeeds {
		t.Errorf("%d seeds, want at most %d", len(many.Session), MaxSeeds)
	}
	if none := s.SeedQuery(*real, Preferences{}, 0); !slices.Equal(none.Session, real.Session) {
		t.Errorf("no preferences changed the session to %v", none.Session)
	}
}

func mustTrending(t *testing.T, s *Set) *Trending {
	t.Helper()
	m, err := s.Get("trending")
	if err != nil {
		t.Fatal(err)
	}
	return m.(*Trending)
}
