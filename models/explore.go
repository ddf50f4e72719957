package models

import (
	"math/rand/v2"
	"slices"
)

// DefaultExploreShare is the share of all answered slots that go to
// exploration by default: one slot in ten. Chosen here, not measured; the
// replay of what the share costs and buys is issue 13's.
const DefaultExploreShare = 0.10

// ExploreRand returns the generator of one answer's exploration, seeded
// from the operator's seed and the answer's request id. The draw is a
// function of those two alone: a replay that numbers its queries the same
// way (or reuses the logged request ids) draws the same, and since serve's
// request ids carry a random per-process prefix, its draws do not repeat
// after a restart or on another replica.
func ExploreRand(seed uint64, request string) *rand.Rand {
	return NewExploreRand(seed, HashSession(request))
}

// Exploration is what [Fresh.Explore] decided for one answer.
type Exploration struct {
	Item ItemID
	// Slot is the answer's index the item takes, never 0: len(ranked)
	// when it is appended to a short answer, else the place of the lowest
	// ranked item that is not fresh.
	Slot int
}

// Explore decides one answer's exploration slot, so that over many answers
// the exploring slots are share of all slots served while no answer has
// more than one. ranked is the blend's answer, best first, at most k
// items. A full answer (k ranked) explores with probability share × k,
// taking the place of its lowest ranked item that is not fresh; a short
// one (L < k ranked) appends the explored item with probability
// share × L / (1 - share), so that its expected share of the L or L+1
// slots served is share too. Where that probability reaches 1 every answer
// explores and the share is 1/k (or 1/(L+1)): one slot per answer is the
// cap. The share is a ceiling: the first slot never explores, an answer
// with nothing ranked does not explore, and a full answer whose slots
// after the first all hold fresh items the blend ranked on its own (a new
// shop, where everything is new) keeps them rather than trade one with
// evidence for one drawn without. The item is drawn by Thompson sampling
// (see [Fresh.Pick]) among the fresh items not already in ranked and not
// skipped.
//
// rng supplies the coin and the draw, in that order; see [ExploreRand].
func (f *Fresh) Explore(q *Query, share float64, k int, ranked []Scored, rng *rand.Rand, skip func(ItemID) bool) (Exploration, bool) {
	if !(share > 0) || k < 2 || len(ranked) == 0 {
		return Exploration{}, false
	}
	slot := len(ranked)
	p := share * float64(k)
	if len(ranked) >= k {
		slot = 0
		for i := k - 1; i >= 1 && slot == 0; i-- {
			if !f.IsFresh(ranked[i].Item, q.Now) {
				slot = i
			}
		}
		if slot == 0 {
			return Exploration{}, false
		}
	} else {
		p = 1
		if share < 1 {
			p = share * float64(len(ranked)) / (1 - share)
		}
	}
	if rng.Float64() >= p {
		return Exploration{}, false
	}
	picks := f.Pick(q, 1, rng, func(id ItemID) bool {
		return slices.ContainsFunc(ranked, func(s Scored) bool { return s.Item == id }) || (skip != nil && skip(id))
	}, nil)
	if len(picks) == 0 {
		return Exploration{}, false
	}
	return Exploration{Item: picks[0].Item, Slot: slot}, true
}
