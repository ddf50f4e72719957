package models

import "fmt"

// SR is Sequential Rules: for every item a clicked up to Window steps before
// b in one session it adds 1/gap to the rule a→b, and scores candidates from
// the session's last item.
type SR struct {
	window int
	rules  *pairTable
	ranked // ranked lists, kept once a single-model query asks (keepTops)
	prefix string
}

// NewSR returns a Sequential Rules model over rules spanning at most window
// steps, keeping at most capPerItem rules per item (0 keeps all).
func NewSR(window, capPerItem int) *SR {
	if window < 1 {
		window = 1
	}
	t := newPairTable(capPerItem)
	return &SR{window: window, rules: t, ranked: ranked{rows: t}}
}

func (m *SR) Name() string { return fmt.Sprintf("sr(window=%d)", m.window) }

func (m *SR) Observe(o *Observation) {
	if o.Repeat {
		return
	}
	n := len(o.Window)
	for gap := 1; gap <= m.window && gap <= n; gap++ {
		a := o.Window[n-gap].Item
		if a == o.Item {
			continue
		}
		m.bump(a, o.Item, m.rules.add(a, o.Item, o.Weight/float64(gap)))
	}
}

func (m *SR) Candidates(q *Query, out *Scores) {
	last, ok := q.Last()
	if !ok {
		return
	}
	m.rules.addRow(last, out)
}

func (m *SR) ScoreItems(q *Query, items []ItemID, out []float64) {
	last, ok := q.Last()
	for i, id := range items {
		out[i] = 0
		if ok {
			out[i] = m.rules.get(last, id)
		}
	}
}

func (m *SR) SetPrefix(prefix string)    { m.prefix = prefix }
func (m *SR) Prefix() string             { return m.prefix }
func (m *SR) Flush(kv KV) error          { return m.rules.flush(kv, m.prefix) }
func (m *SR) Load(key, val []byte) error { return m.load(key[len(m.prefix):], val) }

func (m *SR) Rescale(f float64) {
	m.rules.rescale(f)
	m.rebuild()
}

// DirtyBytes estimates the next flush's size.
func (m *SR) DirtyBytes() int { return m.rules.dirtyBytes }

// LoadBound implements ItemBounded.
func (m *SR) LoadBound(n int) { m.rules.bound = n }

// LoadedItems implements ItemBounded.
func (m *SR) LoadedItems() int { return m.rules.seen }
