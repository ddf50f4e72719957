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
	// Slot is the answer's index the item takes: len(ranked) when it is
	// appended to a short answer, else the last slot (k-1), never 0.
	Slot int
}

// Explore decides one answer's exploration slot, so that over many answers
// the exploring slots are share of all slots served while no answer has
// more than one. ranked is the blend's answer, best first, at most k
// items. A full answer (k ranked) explores its last slot with probability
// share × k; a short one (L < k ranked) appends the explored item with
// probability share × L / (1 - share), so that its expected share of the
// L or L+1 slots served is share too. Where that probability reaches 1
// every answer explores and the share is 1/k (or 1/(L+1)): one slot per
// answer is the cap. The first slot never explores; an answer with nothing
// ranked does not explore. The item is drawn by Thompson sampling (see
// [Fresh.Pick]) among the fresh items not already in ranked and not
// skipped.
//
// rng supplies the coin and the draw, in that order; see [ExploreRand].
func (f *Fresh) Explore(q *Query, share float64, k int, ranked []Scored, rng *rand.Rand, skip func(ItemID) bool) (Exploration, bool) {
	if !(share > 0) || k < 2 || len(ranked) == 0 {
		return Exploration{}, false
	}
	slot := min(len(ranked), k-1)
	p := share * float64(k)
	if len(ranked) < k {
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
