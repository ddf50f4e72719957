package models

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
)

// The content back-off follows the formula on Blend: for the last item a
// and candidate c, content weighs w · n0/(n0 + min(n_a, n_c)), with n the
// decayed click count, here summed directly from the clicks.
func TestBlendContentBackoff(t *testing.T) {
	evs, names := csTentShop(1)
	s := NewSet(DefaultSetOptions())
	m, err := s.Get("blend(content=1,sr=1,backoff=10)")
	if err != nil {
		t.Fatal(err)
	}
	b := m.(*Blend)
	d := newCSDriver(s)
	d.play(evs)
	t2, t9 := names["T2"], names["T9"]
	now := evs[len(evs)-1].Info.TS
	decayed := func(id ItemID) float64 {
		n := 0.0
		for _, e := range evs {
			if e.Info == nil && e.Item == id {
				n += math.Exp2(-float64(now-e.TS) / float64(csHalfLife.Milliseconds()))
			}
		}
		return n
	}
	q := csQuery(now, 0, t2)
	content := &b.signals[slicesIndexSignal(b, "content")]
	cf, ok := b.contentBackoff(content, q)
	if !ok {
		t.Fatal("no content back-off for a session with a last item")
	}
	for _, c := range []ItemID{names["T0"], names["T4"], t9} {
		want := 10 / (10 + math.Min(decayed(t2), decayed(c)))
		if got := cf(c); math.Abs(got-want) > 1e-9 {
			t.Errorf("factor for T2→%d = %.12f, want %.12f", c, got, want)
		}
	}
	if got := cf(t9); got != 1 {
		t.Errorf("an unclicked candidate gets factor %g, want 1", got)
	}
	// The blended score of a candidate with evidence is the weighted sum of
	// the reported features; a popularity fill (only the pop feature) ranks
	// below all of them.
	res := b.Explain(q, 10, nil, Budget{})
	sigs := b.Signals()
	lowest, highestFill := math.Inf(1), 0.0
	for i, it := range res.Items {
		fill := true
		for si, f := range res.Features[i] {
			fill = fill && (f == 0 || sigs[si] == "pop")
		}
		if fill {
			highestFill = math.Max(highestFill, it.Score)
			continue
		}
		lowest = math.Min(lowest, it.Score)
		want := 0.0
		for si, f := range res.Features[i] {
			w := 1.0
			switch sigs[si] {
			case "pop":
				w = DefaultPopWeight
			case "content":
				w = cf(it.Item)
			}
			want += w * f
		}
		if math.Abs(it.Score-want) > 1e-12 {
			t.Errorf("item %d: score %.15g, features give %.15g", it.Item, it.Score, want)
		}
	}
	if highestFill >= lowest {
		t.Errorf("a popularity fill scores %g, not below every candidate with evidence (lowest %g)", highestFill, lowest)
	}
	// As T9 gathers clicks its content weight beside T2 falls: 10 decayed
	// clicks halve it.
	ts := now
	for i := range 10 {
		ts++
		d.apply(&csEvent{Session: fmt.Sprintf("late%d", i), Item: t9, TS: ts})
	}
	q.Now = ts
	want := 10 / (10 + decayedAt(evs, t9, ts) + sumLate(10, now, ts))
	cf, _ = b.contentBackoff(content, q)
	if got := cf(t9); math.Abs(got-want) > 1e-9 || math.Abs(got-0.5) > 1e-3 {
		t.Errorf("after 10 clicks the factor is %g, want %g (about 0.5)", got, want)
	}
}

func slicesIndexSignal(b *Blend, name string) int {
	for i, s := range b.signals {
		if s.Name == name {
			return i
		}
	}
	panic("no signal " + name)
}

func decayedAt(evs []csEvent, id ItemID, now int64) float64 {
	n := 0.0
	for _, e := range evs {
		if e.Info == nil && e.Item == id {
			n += math.Exp2(-float64(now-e.TS) / float64(csHalfLife.Milliseconds()))
		}
	}
	return n
}

// sumLate is the decayed weight at now of k clicks at start+1..start+k.
func sumLate(k int, start, now int64) float64 {
	n := 0.0
	for i := 1; i <= k; i++ {
		n += math.Exp2(-float64(now-(start+int64(i))) / float64(csHalfLife.Milliseconds()))
	}
	return n
}

// launchWorld is a generated shop stream with items launched mid-stream:
// 8 categories of 25 items, sessions that walk a category (half the time
// to the item's successor, the sequential pattern collaborative models
// learn), and a new item launched into a random category every 50
// sessions, which that category's visitors then pick up often.
func launchWorld(seed uint64, sessions int) []csEvent {
	rng := rand.New(rand.NewPCG(seed, 11))
	const cats, per = 8, 25
	t0 := int64(1_767_225_600_000)
	var evs []csEvent
	rec := func(id ItemID, c int, ts int64) {
		evs = append(evs, csEvent{Info: &ItemInfo{Item: id, Available: true, TS: ts, Published: ts, Attrs: map[string][]string{
			"category": {fmt.Sprintf("dept%d/shelf%d", c/2, c)},
			"tags":     {fmt.Sprintf("kind%d", c), fmt.Sprintf("style%d", int(id)%5)},
			"title":    {fmt.Sprintf("model%d line%d", int(id)%7, c)},
		}}})
	}
	members := make([][]ItemID, cats)
	for c := range cats {
		for i := range per {
			id := ItemID(c*per + i)
			members[c] = append(members[c], id)
			rec(id, c, t0)
		}
	}
	next := ItemID(cats * per)
	var launched [][]ItemID = make([][]ItemID, cats)
	ts := t0
	for s := range sessions {
		if s > 0 && s%50 == 0 {
			c := rng.IntN(cats)
			rec(next, c, ts)
			members[c] = append(members[c], next)
			launched[c] = append(launched[c], next)
			next++
		}
		c := min(int(rng.ExpFloat64()*2.5), cats-1)
		cur := members[c][rng.IntN(per)]
		n := 2 + rng.IntN(6)
		for range n {
			ts += 2_000 + rng.Int64N(10_000)
			evs = append(evs, csEvent{Session: fmt.Sprintf("v%d", s), Item: cur, TS: ts})
			switch r := rng.Float64(); {
			case r < 0.45 && int(cur) < cats*per:
				cur = ItemID(c*per + (int(cur)-c*per+1)%per)
			case r < 0.60 && len(launched[c]) > 0:
				l := launched[c]
				cur = l[len(l)-1-rng.IntN(min(2, len(l)))] // the newest launches
			case r < 0.90:
				cur = members[c][rng.IntN(len(members[c]))]
			default:
				c2 := rng.IntN(cats)
				cur = members[c2][rng.IntN(len(members[c2]))]
			}
		}
	}
	return evs
}

type hitStats struct{ n, hits, coldN, coldHits int }

func (h hitStats) rate() float64     { return float64(h.hits) / float64(max(h.n, 1)) }
func (h hitStats) coldRate() float64 { return float64(h.coldHits) / float64(max(h.coldN, 1)) }

// prequential asks before it teaches: for every click after a session's
// first, in the second half of the stream, recommend 20 items from the
// session's window and look for the click; a target with fewer than 5
// clicks so far is cold.
func prequential(t *testing.T, spec string, evs []csEvent) hitStats {
	s := NewSet(DefaultSetOptions())
	m, err := s.Get(spec)
	if err != nil {
		t.Fatal(err)
	}
	d := newCSDriver(s)
	r := s.Recommender(m)
	clicks := map[ItemID]int{}
	var h hitStats
	for i := range evs {
		e := &evs[i]
		if e.Info == nil && i > len(evs)/2 {
			if win := d.wins[e.Session]; len(win) > 0 && win[len(win)-1].Item != e.Item {
				q := &Query{Session: win, Now: e.TS, SessionNo: d.nos[e.Session]}
				hit := false
				for _, x := range r.Recommend(q, 20, nil, nil) {
					if x.Item == e.Item {
						hit = true
						break
					}
				}
				h.n++
				if hit {
					h.hits++
				}
				if clicks[e.Item] < 5 {
					h.coldN++
					if hit {
						h.coldHits++
					}
				}
			}
		}
		d.apply(e)
		if e.Info == nil {
			clicks[e.Item]++
		}
	}
	return h
}

// What adding the cold-start signals to the default blend does, measured
// on a generated stream with launches (the replay numbers on real data
// belong to bench/RESULTS.md). The default blend is the core blend plus
// content: it must lift HitRate@20 on cold targets, and no variant here may
// cost more than a point overall. Measured when this was written (seed 5,
// 3000 sessions, 4966 targets, 137 cold), HitRate@20 overall / cold:
// core 0.6816 / 0.2044; default (core+content) 0.7235 / 0.8248;
// core+vsknn 0.6933 / 0.1971; core+content+vsknn 0.7183 / 0.6788;
// core+content+vstan=0.5 0.7253 / 0.8102.
func TestDefaultBlendColdStartMeasured(t *testing.T) {
	if testing.Short() {
		t.Skip("prequential run over a generated stream")
	}
	evs := launchWorld(5, 3000)
	core := "blend(markov=1,sr=1,iknn=1)"
	specs := []string{core, DefaultBlendSpec, "blend(markov=1,sr=1,iknn=1,vsknn=1)",
		"blend(markov=1,sr=1,iknn=1,content=1,vsknn=1)", "blend(markov=1,sr=1,iknn=1,content=1,vstan=0.5)"}
	res := map[string]hitStats{}
	for _, sp := range specs {
		res[sp] = prequential(t, sp, evs)
		t.Logf("%-40s HitRate@20 %.4f (%d)  cold %.4f (%d)", sp, res[sp].rate(), res[sp].n, res[sp].coldRate(), res[sp].coldN)
	}
	base := res[core]
	for _, sp := range specs[1:] {
		if res[sp].rate() < base.rate()-0.01 {
			t.Errorf("%s: HitRate@20 %.4f below the core blend's %.4f", sp, res[sp].rate(), base.rate())
		}
	}
	if def := res[DefaultBlendSpec]; def.coldRate() <= base.coldRate() {
		t.Errorf("default blend: cold HitRate@20 %.4f, core %.4f: content did not help", def.coldRate(), base.coldRate())
	}
	if base.coldN < 100 {
		t.Errorf("only %d cold targets: the stream does not test cold start", base.coldN)
	}
}
