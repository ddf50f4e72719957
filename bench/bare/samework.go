package bare

import "waymark/stream"

// SameWork does the pair updates waymark's core learners make for a click,
// in plain Go maps and with nothing else: the hand-rolled alternative to
// the tracker and the markov, sr and iknn learners. Per click it interns
// the item, keeps the session's last Window items, and adds
//
//   - one to the transition from the previous item (markov);
//   - 1/gap to the rule from each of the last SRWindow items (sr);
//   - one to both directions of the co-visitation with every other item
//     in the window, unless the item is already in it, and one to the
//     item's support (iknn);
//   - one to the item's click count (popularity).
//
// A click that repeats the session's last item changes nothing, as in
// waymark. There are no caps, no decay, no timeouts and no persistence:
// memory grows without bound. Its rate is what the same learning job costs
// without waymark's guarantees, where [PairCounter] is the least any
// transition learner does.
type SameWork struct {
	Window, SRWindow int

	ids      map[string]uint32
	sessions map[string][]uint32
	markov   map[uint64]float64
	sr       map[uint64]float64
	covis    map[uint64]float64
	support  []float64
	pop      []float64
}

// NewSameWork returns an empty counter with waymark's default windows:
// a session keeps 20 items and sr's rules span 5.
func NewSameWork() *SameWork {
	return &SameWork{
		Window: 20, SRWindow: 5,
		ids: map[string]uint32{}, sessions: map[string][]uint32{},
		markov: map[uint64]float64{}, sr: map[uint64]float64{}, covis: map[uint64]float64{},
	}
}

func pairKey(a, b uint32) uint64 { return uint64(a)<<32 | uint64(b) }

// Add learns one event.
func (c *SameWork) Add(ev *stream.Event) {
	id, ok := c.ids[ev.Item]
	if !ok {
		id = uint32(len(c.ids))
		c.ids[ev.Item] = id
		c.support = append(c.support, 0)
		c.pop = append(c.pop, 0)
	}
	c.pop[id]++
	w := c.sessions[ev.Session]
	n := len(w)
	if n > 0 && w[n-1] == id {
		return
	}
	if n > 0 {
		c.markov[pairKey(w[n-1], id)]++
	}
	for gap := 1; gap <= c.SRWindow && gap <= n; gap++ {
		if a := w[n-gap]; a != id {
			c.sr[pairKey(a, id)] += 1 / float64(gap)
		}
	}
	if !containsID(w, id) {
		c.support[id]++
		for i, s := range w {
			if containsID(w[:i], s) {
				continue
			}
			c.covis[pairKey(s, id)]++
			c.covis[pairKey(id, s)]++
		}
	}
	if n == c.Window {
		copy(w, w[1:])
		w = w[:n-1]
	}
	c.sessions[ev.Session] = append(w, id)
}

func containsID(w []uint32, id uint32) bool {
	for _, x := range w {
		if x == id {
			return true
		}
	}
	return false
}

// Pairs returns the number of distinct markov, sr and co-visitation pairs.
func (c *SameWork) Pairs() (markov, sr, covis int) { return len(c.markov), len(c.sr), len(c.covis) }
