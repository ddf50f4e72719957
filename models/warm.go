package models

// Warmer is a learner that can name the memory its next Observe will
// update. The pipeline collects the rows every learner is about to update
// for a click into one [WarmBatch] and loads them before any learner
// observes it: the loads are then in flight together, where Observe alone
// would wait for one cache miss after another (a click updates a dozen rows
// spread over tables of hundreds of megabytes). Warming changes nothing a
// learner holds.
type Warmer interface {
	Warm(o *Observation, b *WarmBatch)
}

// WarmBatch is the list of row updates one click will make.
type WarmBatch struct {
	refs []warmRef
	cols []colRef
	sink uint32 // keeps the loads from being optimised away
}

type colRef struct {
	c  *vector
	id ItemID
}

type warmRef struct {
	t    *pairTable
	a, b ItemID
}

// Reset empties the batch for the next click.
func (w *WarmBatch) Reset() {
	w.refs = w.refs[:0]
	w.cols = w.cols[:0]
}

func (w *WarmBatch) addCol(c *vector, id ItemID) {
	w.cols = append(w.cols, colRef{c, id})
}

func (w *WarmBatch) add(t *pairTable, a, b ItemID) {
	w.refs = append(w.refs, warmRef{t: t, a: a, b: b})
}

// Run loads the batch's rows in two passes, the headers and then the first
// slot each update probes. Each pass is a short loop of loads that do not
// depend on each other, so the processor overlaps them; one pass per row
// would stall on each header before reaching the next.
func (w *WarmBatch) Run() {
	var sink uint32
	for _, x := range w.cols {
		if int(x.id) < len(x.c.v) {
			sink += uint32(x.c.v[x.id])
		}
	}
	for _, x := range w.refs {
		if int(x.a) < len(x.t.rows) {
			sink += uint32(len(x.t.rows[x.a].slots))
		}
	}
	// The headers are in cache now: the second pass finds them at once.
	for _, x := range w.refs {
		if int(x.a) < len(x.t.rows) {
			if r := &x.t.rows[x.a]; len(r.slots) > 0 {
				sink += r.slots[rowHash(x.b, uint32(len(r.slots)-1))].key
			}
		}
	}
	w.sink += sink
}

// Warm implements [Warmer]: the rows of the window items and of the
// clicked item.
func (m *IKNN) Warm(o *Observation, b *WarmBatch) {
	if o.Repeat {
		return
	}
	b.addCol(&m.support, o.Item)
	for _, s := range m.coVisited(o.Window) {
		b.add(m.covis, s.Item, o.Item)
		b.add(m.covis, o.Item, s.Item)
	}
}

// Warm implements [Warmer]: the rows of the items within the rule window.
func (m *SR) Warm(o *Observation, b *WarmBatch) {
	if o.Repeat {
		return
	}
	n := len(o.Window)
	for gap := 1; gap <= m.window && gap <= n; gap++ {
		b.add(m.rules, o.Window[n-gap].Item, o.Item)
	}
}

// Warm implements [Warmer]: the row of the previous item.
func (m *Markov) Warm(o *Observation, b *WarmBatch) {
	if o.Repeat || len(o.Window) == 0 {
		return
	}
	b.add(m.trans, o.Window[len(o.Window)-1].Item, o.Item)
}

// Warm implements [Warmer]: the clicked item's count.
func (p *Pop) Warm(o *Observation, b *WarmBatch) { b.addCol(&p.counts, o.Item) }
