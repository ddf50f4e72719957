package models

// Markov is a first-order transition model: it counts a→b for consecutive
// clicks and scores candidates from the session's last item.
type Markov struct {
	trans  *pairTable
	ranked // ranked lists, kept once a single-model query asks (keepTops)
	prefix string
}

// NewMarkov returns a transition model keeping at most capPerItem successors
// per item (0 keeps all).
func NewMarkov(capPerItem int) *Markov {
	t := newPairTable(capPerItem)
	return &Markov{trans: t, ranked: ranked{rows: t}}
}

func (m *Markov) Name() string { return "markov" }

func (m *Markov) Observe(o *Observation) {
	if o.Repeat || len(o.Window) == 0 {
		return
	}
	a := o.Window[len(o.Window)-1].Item
	m.bump(a, o.Item, m.trans.add(a, o.Item, o.Weight))
}

func (m *Markov) Candidates(q *Query, out *Scores) {
	last, ok := q.Last()
	if !ok {
		return
	}
	m.trans.addRow(last, out)
}

func (m *Markov) ScoreItems(q *Query, items []ItemID, out []float64) {
	last, ok := q.Last()
	for i, id := range items {
		out[i] = 0
		if ok {
			out[i] = m.trans.get(last, id)
		}
	}
}

// Pairs returns the number of transitions held, for memory accounting.
func (m *Markov) Pairs() int { return m.trans.size() }

func (m *Markov) SetPrefix(prefix string) { m.prefix = prefix }
func (m *Markov) Prefix() string          { return m.prefix }
func (m *Markov) Flush(kv KV) error       { return m.trans.flush(kv, m.prefix) }
func (m *Markov) Load(key, val []byte) error {
	return m.load(key[len(m.prefix):], val)
}

func (m *Markov) Rescale(f float64) {
	m.trans.rescale(f)
	m.rebuild()
}

// DirtyBytes estimates the next flush's size.
func (m *Markov) DirtyBytes() int { return m.trans.dirtyBytes }

// LoadBound implements ItemBounded.
func (m *Markov) LoadBound(n int) { m.trans.bound = n }

// LoadedItems implements ItemBounded.
func (m *Markov) LoadedItems() int { return m.trans.seen }
