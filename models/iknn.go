package models

import (
	"fmt"
	"math"
	"slices"
	"strings"
)

// IKNN is item-kNN over session co-visitation: two items co-occur when one
// session clicked both, and their similarity is the cosine
// n_ab / sqrt(n_a · n_b) over the session × item incidence (n_a: sessions
// with a, n_ab: sessions with both), optionally shrunk by λ:
// n_ab / (sqrt(n_a · n_b) + λ). Counts are decayed, so recent sessions weigh
// more. A pair is counted once per session: a click on an item the session's
// window already holds adds nothing.
type IKNN struct {
	span    int     // how many of the session's last items vote
	coVisit int     // how many of the window's last items a click co-visits; 0: all
	shrink  float64 // λ, in decayed-count units
	halfMS  float64 // pipeline half-life, to bring λ to landmark units
	ref     int64
	covis   *pairTable
	support vector // n_a
	prefix  string
}

// IKNNOptions configures [NewIKNN].
type IKNNOptions struct {
	Span       int     // last items that vote; default 1 (the usual item-kNN baseline)
	Shrink     float64 // λ; default 0
	CapPerItem int     // neighbours kept per item; 0 keeps all
	// CoVisit bounds learning: a click co-visits only the last CoVisit
	// items of the session's window, not all of them, which bounds the
	// row updates per click at 2·CoVisit. 0 (the default) co-visits the
	// whole window, the exact definition above.
	CoVisit int
}

// NewIKNN returns an empty item-kNN model.
func NewIKNN(opts IKNNOptions) *IKNN {
	if opts.Span < 1 {
		opts.Span = 1
	}
	return &IKNN{span: opts.Span, coVisit: max(0, opts.CoVisit), shrink: opts.Shrink, covis: newPairTable(opts.CapPerItem)}
}

func (m *IKNN) Name() string {
	var params []string
	if m.span != 1 {
		params = append(params, fmt.Sprintf("span=%d", m.span))
	}
	if m.shrink != 0 {
		params = append(params, fmt.Sprintf("shrink=%g", m.shrink))
	}
	if m.coVisit != 0 {
		params = append(params, fmt.Sprintf("covis=%d", m.coVisit))
	}
	if len(params) == 0 {
		return "iknn"
	}
	return "iknn(" + strings.Join(params, ",") + ")"
}

func (m *IKNN) Observe(o *Observation) {
	if o.Repeat {
		return
	}
	top := o.Item
	for _, s := range o.Window {
		if s.Item == o.Item {
			return // already co-visited with everything in the window
		}
		top = max(top, s.Item)
	}
	m.support.add(o.Item, o.Weight)
	t := m.covis
	t.grow(top)
	// Row o.Item is updated once per window item and row s.Item once:
	// rows are independent, so the order across rows does not matter.
	ro := &t.rows[o.Item]
	w := m.coVisited(o.Window)
	for i, s := range w {
		if seenBefore(w[:i], s.Item) {
			continue
		}
		t.addTo(&t.rows[s.Item], s.Item, o.Item, o.Weight)
		t.addTo(ro, o.Item, s.Item, o.Weight)
	}
}

// coVisited returns the part of the window a click co-visits.
func (m *IKNN) coVisited(w []Step) []Step {
	if m.coVisit > 0 && len(w) > m.coVisit {
		return w[len(w)-m.coVisit:]
	}
	return w
}

func seenBefore(w []Step, id ItemID) bool {
	for _, s := range w {
		if s.Item == id {
			return true
		}
	}
	return false
}

// sim returns the cosine of a and b given their co-visitation weight nab.
// With shrinkage, λ is converted to landmark units at time now.
func (m *IKNN) sim(a, b ItemID, nab float64, now int64) float64 {
	return m.simFrom(m.support.get(a), b, nab, m.shrinkTerm(now))
}

// simFrom is sim with a's support and the shrinkage term already looked up,
// so a query computes them once per voter and once per query.
func (m *IKNN) simFrom(sa float64, b ItemID, nab, shrink float64) float64 {
	d := math.Sqrt(sa * m.support.get(b))
	if d == 0 {
		return 0
	}
	return nab / (d + shrink)
}

// SetDecay tells the model the pipeline's decay so shrinkage can be applied
// in decayed units.
func (m *IKNN) SetDecay(d Decay) { m.halfMS, m.ref = d.HalfLifeMS, d.Ref }

// voters returns the session's last span distinct items with position
// weights: the last item 1, earlier ones 1/(1+distance).
func (m *IKNN) voters(q *Query, f func(a ItemID, pw float64)) {
	n := 0
	for i := len(q.Session) - 1; i >= 0 && n < m.span; i-- {
		a := q.Session[i].Item
		if seenBefore(q.Session[i+1:], a) {
			continue
		}
		f(a, 1/float64(1+n))
		n++
	}
}

func (m *IKNN) Candidates(q *Query, out *Scores) {
	shrink := m.shrinkTerm(q.Now)
	// One voter's row holds distinct items: into an empty out the first
	// voter appends; later voters add onto what earlier ones found.
	add := out.Add
	if out.Len() == 0 {
		add = out.Append
	}
	m.voters(q, func(a ItemID, pw float64) {
		sa := m.support.get(a)
		m.covis.each(a, func(b ItemID, w float64) { add(b, pw*m.simFrom(sa, b, w, shrink)) })
		add = out.Add
	})
}

// shrinkTerm is what sim adds to a pair's denominator at now.
func (m *IKNN) shrinkTerm(now int64) float64 {
	if m.shrink != 0 && m.halfMS > 0 {
		return m.shrink * math.Exp2(float64(now-m.ref)/m.halfMS)
	}
	return 0
}

func (m *IKNN) ScoreItems(q *Query, items []ItemID, out []float64) {
	clear(out)
	m.voters(q, func(a ItemID, pw float64) {
		for i, b := range items {
			if w := m.covis.get(a, b); w != 0 {
				out[i] += pw * m.sim(a, b, w, q.Now)
			}
		}
	})
}

// Neighbor is an item and its similarity to another.
type Neighbor struct {
	Item  ItemID
	Score float64
}

// Neighbors returns a's k most similar items, most similar first, ties by
// lower id.
func (m *IKNN) Neighbors(a ItemID, k int, now int64) []Neighbor {
	var all []Neighbor
	m.covis.each(a, func(b ItemID, w float64) {
		all = append(all, Neighbor{b, m.sim(a, b, w, now)})
	})
	slices.SortFunc(all, func(x, y Neighbor) int { return cmpScore(x.Score, y.Score, x.Item, y.Item) })
	if len(all) > k {
		all = all[:k]
	}
	return all
}

// Pairs returns the number of co-visitation pairs held.
func (m *IKNN) Pairs() int { return m.covis.size() }

func (m *IKNN) SetPrefix(prefix string) { m.prefix = prefix }
func (m *IKNN) Prefix() string          { return m.prefix }

func (m *IKNN) Flush(kv KV) error {
	if err := m.support.flush(kv, m.prefix+"n/"); err != nil {
		return err
	}
	return m.covis.flush(kv, m.prefix+"c/")
}

func (m *IKNN) Load(key, val []byte) error {
	k := key[len(m.prefix):]
	switch {
	case len(k) > 2 && string(k[:2]) == "n/":
		return m.support.load(k[2:], val)
	case len(k) > 2 && string(k[:2]) == "c/":
		return m.covis.load(k[2:], val)
	}
	return fmt.Errorf("%w: iknn key %q", ErrCorrupt, key)
}

func (m *IKNN) Rescale(f float64) {
	m.support.rescale(f)
	m.covis.rescale(f)
}

// DirtyBytes estimates the next flush's size.
func (m *IKNN) DirtyBytes() int { return m.covis.dirtyBytes + 12*len(m.support.dirty) }

// LoadBound implements ItemBounded.
func (m *IKNN) LoadBound(n int) { m.support.bound, m.covis.bound = n, n }

// LoadedItems implements ItemBounded.
func (m *IKNN) LoadedItems() int { return max(m.support.seen, m.covis.seen) }
