package models

// Warmer is a learner that can start loading the memory its next Observe
// will update. The pipeline warms every learner for a click before any of
// them observes it: the loads of all learners are then in flight together,
// where Observe alone would wait for one cache miss after another (each
// click updates a dozen rows spread over tables of hundreds of megabytes).
// Warm changes nothing a learner holds.
type Warmer interface {
	Warm(o *Observation)
}

// Warm implements [Warmer]: the rows of the window items and of the
// clicked item.
func (m *IKNN) Warm(o *Observation) {
	if o.Repeat {
		return
	}
	t := m.covis
	var sink uint32
	for _, s := range o.Window {
		sink += t.warm(s.Item, o.Item) + t.warm(o.Item, s.Item)
	}
	t.sink += sink
}

// Warm implements [Warmer]: the rows of the items within the rule window.
func (m *SR) Warm(o *Observation) {
	if o.Repeat {
		return
	}
	n := len(o.Window)
	var sink uint32
	for gap := 1; gap <= m.window && gap <= n; gap++ {
		sink += m.rules.warm(o.Window[n-gap].Item, o.Item)
	}
	m.rules.sink += sink
}

// Warm implements [Warmer]: the row of the previous item.
func (m *Markov) Warm(o *Observation) {
	if o.Repeat || len(o.Window) == 0 {
		return
	}
	m.trans.sink += m.trans.warm(o.Window[len(o.Window)-1].Item, o.Item)
}
