package models

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// The Beta sampler's mean and variance match the distribution's,
// a/(a+b) and ab/((a+b)²(a+b+1)) (common practice), for shapes below and
// above 1.
func TestSampleBetaMoments(t *testing.T) {
	for _, p := range [][2]float64{{1, 1}, {0.5, 0.5}, {2, 30}, {40, 10}} {
		a, b := p[0], p[1]
		rng := NewExploreRand(7, uint64(a*100+b))
		const n = 200_000
		sum, sum2 := 0.0, 0.0
		for range n {
			x := sampleBeta(rng, a, b)
			if x < 0 || x > 1 {
				t.Fatalf("Beta(%g,%g) drew %g", a, b, x)
			}
			sum += x
			sum2 += x * x
		}
		mean := sum / n
		vr := sum2/n - mean*mean
		wantMean := a / (a + b)
		wantVar := a * b / ((a + b) * (a + b) * (a + b + 1))
		// 5 standard errors of the mean; variance within 3 %
		if math.Abs(mean-wantMean) > 5*math.Sqrt(wantVar/n) || math.Abs(vr-wantVar) > 0.03*wantVar {
			t.Errorf("Beta(%g,%g): mean %.5f var %.6f, want %.5f %.6f", a, b, mean, vr, wantMean, wantVar)
		}
	}
}

func newTestFresh(t *testing.T, opts FreshOptions, cat *Catalog, content *Content) *Fresh {
	t.Helper()
	f, err := NewFresh(opts, cat, content)
	if err != nil {
		t.Fatal(err)
	}
	return f
}

// simulateFresh runs rounds of one exploration slot over items with the
// given true click rates and returns each item's exposures, in total and
// over the last quarter of the rounds.
func simulateFresh(t *testing.T, seed uint64, rates []float64, rounds int) (total, late []int) {
	f := newTestFresh(t, DefaultFreshOptions(), nil, nil)
	t0 := int64(1_767_225_600_000)
	for i := range rates {
		f.ObserveItem(&ItemInfo{Item: ItemID(i), Available: true, TS: t0, Published: t0})
	}
	clicks := rand.New(rand.NewPCG(seed, 99)) // the visitors, apart from the sampler
	total, late = make([]int, len(rates)), make([]int, len(rates))
	for r := range rounds {
		now := t0 + int64(r)*1000 // all within the 48 h window
		q := &Query{Now: now}
		got := f.Pick(q, 1, NewExploreRand(seed, uint64(r)), nil, nil)
		if len(got) != 1 {
			t.Fatalf("round %d: picked %v", r, got)
		}
		id := got[0].Item
		total[id]++
		if r >= rounds*3/4 {
			late[id]++
		}
		f.RecordImpressions([]ItemID{id}, now)
		if clicks.Float64() < rates[id] {
			f.RecordSuccess(id, now)
		}
	}
	return total, late
}

// Thompson sampling with known click rates: the best fresh item gets most
// of the exposure, more so as evidence accumulates, and every fresh item
// gets some. Seeded, so the run is reproducible.
func TestFreshThompsonSimulation(t *testing.T) {
	rates := []float64{0.02, 0.05, 0.08, 0.12, 0.25}
	const rounds = 4000
	total, late := simulateFresh(t, 1, rates, rounds)
	best := len(rates) - 1
	for i, n := range total {
		if i != best && n >= total[best] {
			t.Errorf("item %d (rate %g) shown %d times, the best %d", i, rates[i], n, total[best])
		}
		if n < 20 {
			t.Errorf("item %d (rate %g) shown only %d times: not explored", i, rates[i], n)
		}
	}
	if total[best] < rounds/2 {
		t.Errorf("best item shown %d of %d times", total[best], rounds)
	}
	if share := float64(late[best]) / float64(rounds/4); share < 0.7 {
		t.Errorf("best item's share in the last quarter is %.2f", share)
	}
	again, _ := simulateFresh(t, 1, rates, rounds)
	if !slices.Equal(total, again) {
		t.Errorf("same seed, different exposures: %v then %v", total, again)
	}
	other, _ := simulateFresh(t, 2, rates, rounds)
	if slices.Equal(total, other) {
		t.Errorf("seeds 1 and 2 gave identical exposures %v", total)
	}
	t.Logf("exposures %v (last quarter %v) for rates %v", total, late, rates)
}

// Freshness means new (issue 13, finding 4): an item competes while it
// was first seen less than the window ago, in event time, and only then;
// an old item rarely or never shown is not fresh; an unavailable item never
// competes.
func TestFreshEligibility(t *testing.T) {
	t0 := int64(1_767_225_600_000)
	cat := NewCatalog()
	f := newTestFresh(t, DefaultFreshOptions(), cat, nil)
	const young, old, oldUnshown, gone, clicked = 0, 1, 2, 3, 4
	f.ObserveItem(&ItemInfo{Item: young, Available: true, Published: t0 + 47*3600*1000, TS: t0})
	f.ObserveItem(&ItemInfo{Item: old, Available: true, Published: t0, TS: t0})
	f.ObserveItem(&ItemInfo{Item: oldUnshown, Available: true, Published: t0, TS: t0})
	info := &ItemInfo{Item: gone, Available: false, TS: t0}
	f.ObserveItem(info)
	cat.ObserveItem(info)
	f.Served(0, []ItemID{old, old, old}, t0)
	// No record: its first click is its birth, 49 h after t0.
	f.Observe(&Observation{Item: clicked, TS: t0 + 49*3600*1000})
	now := t0 + 50*3600*1000 // 50 h: items published at t0 are past the 48 h window
	got := f.Pick(&Query{Now: now}, 10, NewExploreRand(1, 1), nil, nil)
	var ids []ItemID
	for _, s := range got {
		ids = append(ids, s.Item)
	}
	slices.Sort(ids)
	if want := []ItemID{young, clicked}; !slices.Equal(ids, want) {
		t.Errorf("picked %v, want %v (only items first seen within 48 h)", ids, want)
	}
	for id, want := range map[ItemID]bool{young: true, clicked: true, old: false, oldUnshown: false, gone: false} {
		if got := f.IsFresh(id, now); got != want {
			t.Errorf("IsFresh(%d) = %v, want %v", id, got, want)
		}
	}
	if got := f.Pick(&Query{Now: now}, 10, NewExploreRand(1, 1), func(id ItemID) bool { return id == young }, nil); len(got) != 1 || got[0].Item != clicked {
		t.Errorf("with young skipped picked %v", got)
	}
	if got := f.Pick(&Query{Now: now}, 0, NewExploreRand(1, 1), nil, nil); len(got) != 0 {
		t.Errorf("n=0 picked %v", got)
	}
}

// A click by a tracked session on an item it was shown counts as a
// success, once; a click on an item it was not shown does not. Only fresh
// items count impressions: an item past its window reported as shown is
// left alone.
func TestFreshServedCredit(t *testing.T) {
	f := newTestFresh(t, DefaultFreshOptions(), nil, nil)
	const x, y, stale = 0, 1, 2
	for _, id := range []ItemID{x, y} {
		f.ObserveItem(&ItemInfo{Item: id, Available: true, Published: 5, TS: 5})
	}
	f.ObserveItem(&ItemInfo{Item: stale, Available: true, Published: 1, TS: 1})
	// At 48 h + 2 ms, x and y (published at 5 ms) are fresh, stale (1 ms)
	// is not.
	f.Served(7, []ItemID{x, y, stale}, 48*3600*1000+2)
	if i, _ := f.Stats(stale); i != 0 {
		t.Errorf("stale: %d impressions; an item that is not fresh counts none", i)
	}
	f.Observe(&Observation{Item: x, TS: 11, SessionNo: 7})
	f.Observe(&Observation{Item: x, TS: 12, SessionNo: 7}) // second click: no new credit
	f.Observe(&Observation{Item: y, TS: 13, SessionNo: 8}) // another session
	if i, c := f.Stats(x); i != 1 || c != 1 {
		t.Errorf("x: %d impressions %d clicks, want 1 1", i, c)
	}
	if i, c := f.Stats(y); i != 1 || c != 0 {
		t.Errorf("y: %d impressions %d clicks, want 1 0", i, c)
	}
	f.RecordSuccess(y, 14)
	f.RecordSuccess(y, 15) // more clicks than impressions: ignored
	if _, c := f.Stats(y); c != 1 {
		t.Errorf("y: %d clicks, want 1", c)
	}
}

// With content available, a fresh item like the session's items wins the
// slot more often than an equally unknown item unlike them.
func TestFreshPrefersContentSimilar(t *testing.T) {
	evs, names := csTentShop(1)
	s := NewSet(DefaultSetOptions())
	m, err := s.Get("fresh")
	if err != nil {
		t.Fatal(err)
	}
	d := newCSDriver(s)
	d.play(evs)
	f := m.(*Fresh)
	now := evs[len(evs)-1].Info.TS
	// A new stove arrives; T9 (a new tent) is already there. Both unshown.
	stove := ItemID(len(names))
	d.apply(&csEvent{Info: &ItemInfo{Item: stove, Available: true, TS: now, Published: now, Attrs: map[string][]string{
		"category": {"cooking/stoves"}, "tags": {"stove", "burner"}, "title": {"gel fuel camping stove"}}}})
	tent := names["T9"]
	q := csQuery(now, 0, names["T1"], names["T2"])
	wins := map[ItemID]int{}
	for r := range 500 {
		got := f.Pick(q, 1, NewExploreRand(3, uint64(r)), func(id ItemID) bool { return id != tent && id != stove }, nil)
		if len(got) == 1 {
			wins[got[0].Item]++
		}
	}
	if wins[tent] <= 2*wins[stove] {
		t.Errorf("after tents, the new tent won %d slots and the new stove %d", wins[tent], wins[stove])
	}
	t.Logf("new tent won %d slots, new stove %d", wins[tent], wins[stove])
}

// Shortlist: with more eligible items than shortlistSize, only those with
// the highest upper confidence bounds draw, ineligible ones never do, and
// the draws among the shortlist still follow Thompson sampling. The bound
// is the Beta posterior's mean plus three standard deviations (the Beta
// variance ab/((a+b)²(a+b+1)), common practice).
func TestFreshShortlist(t *testing.T) {
	t0 := int64(1_767_225_600_000)
	f := newTestFresh(t, DefaultFreshOptions(), NewCatalog(), nil)
	const n = 300
	for id := range ItemID(n) {
		f.ObserveItem(&ItemInfo{Item: id, Available: true, Published: t0, TS: t0})
	}
	// Items 0..9 unshown (bound 0.5 + 3·0.2887 = 1.366), item 150 shown
	// 100 times with 60 clicks (bound about 0.74), the rest shown 100 times
	// with 2 clicks (about 0.07). Item 5 is skipped by the caller.
	const good, skipped = 150, 5
	for id := ItemID(10); id < n; id++ {
		clicks := 2
		if id == good {
			clicks = 60
		}
		for i := range 100 {
			f.RecordImpressions([]ItemID{id}, t0)
			if i < clicks {
				f.RecordSuccess(id, t0)
			}
		}
	}
	q := &Query{Now: t0 + 1000}
	skip := func(id ItemID) bool { return id == skipped }
	got := f.shortlist(q, shortlistSize(1), skip)
	// 9 unshown (item 5 skipped), the good item, then the 54 lowest ids of
	// the equal rest (ties go to the lower id).
	var want []ItemID
	for id := range ItemID(10) {
		if id != skipped {
			want = append(want, id)
		}
	}
	for id := ItemID(10); len(want) < 10+53; id++ {
		if id != good {
			want = append(want, id)
		}
	}
	want = append(want, good)
	slices.Sort(want)
	if len(got) != shortlistSize(1) || !slices.Equal(got, want) {
		t.Fatalf("shortlist (%d items) = %v,\nwant (%d) %v", len(got), got, len(want), want)
	}
	// The bound order is the pool sorted by bound, and a model loaded from
	// a flush has the same order and shortlist.
	checkByUB(t, f)
	kv := newMemKV()
	if err := f.Flush(kv); err != nil {
		t.Fatal(err)
	}
	g := newTestFresh(t, DefaultFreshOptions(), NewCatalog(), nil)
	if err := kv.scan("", g.Load); err != nil {
		t.Fatal(err)
	}
	checkByUB(t, g)
	if again := g.shortlist(q, shortlistSize(1), skip); !slices.Equal(again, got) {
		t.Errorf("after Flush and Load the shortlist is %v, want %v", again, got)
	}
	// Among the shortlist the unshown items win most draws, the good item
	// some, the skipped item none.
	wins := map[ItemID]int{}
	for r := range 2000 {
		for _, p := range f.Pick(q, 1, NewExploreRand(9, uint64(r)), skip, nil) {
			wins[p.Item]++
		}
	}
	unshown := 0
	for id := range ItemID(10) {
		unshown += wins[id]
	}
	if wins[skipped] != 0 || unshown < 1500 || wins[good] == 0 {
		t.Errorf("wins: unshown %d of 2000, good %d, skipped %d (want most, some, none)", unshown, wins[good], wins[skipped])
	}
	t.Logf("wins: unshown %d, good %d, others %d", unshown, wins[good], 2000-unshown-wins[good])
}

// checkByUB checks that byUB holds exactly the pool, ordered by upper
// bound, best first, ties by lower id.
func checkByUB(t *testing.T, f *Fresh) {
	t.Helper()
	got := slices.Clone(f.byUB)
	want := slices.Clone(f.pool)
	slices.SortFunc(want, func(a, b ItemID) int {
		return cmpScore(f.upperBound(f.imps[a], f.succ[a]), f.upperBound(f.imps[b], f.succ[b]), a, b)
	})
	if !slices.Equal(got, want) {
		t.Fatalf("byUB = %v,\nwant %v", got, want)
	}
}
