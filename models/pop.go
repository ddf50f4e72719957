package models

import "encoding/binary"

// Pop ranks items by decayed click count. It answers sessions that no other
// model can: an empty session, or one whose items are all unknown.
type Pop struct {
	counts vector
	top    *topList
	prefix string
}

// popTopN bounds how many popular items are kept ranked; requests ask for at
// most 1000 items.
const popTopN = 1000

// NewPop returns an empty popularity model.
func NewPop() *Pop {
	p := &Pop{}
	p.top = newTopList(popTopN, p.counts.get)
	return p
}

func (p *Pop) Name() string { return "pop" }

func (p *Pop) Observe(o *Observation) {
	p.counts.add(o.Item, o.Weight)
	p.top.touch(o.Item)
}

// Candidates adds the most popular items, whatever the session.
func (p *Pop) Candidates(q *Query, out *Scores) {
	for _, id := range p.top.items {
		out.Add(id, p.counts.get(id))
	}
}

func (p *Pop) ScoreItems(q *Query, items []ItemID, out []float64) {
	for i, id := range items {
		out[i] = p.counts.get(id)
	}
}

// Count returns the landmark-form count of id.
func (p *Pop) Count(id ItemID) float64 { return p.counts.get(id) }

// Top returns up to n of the most popular items, most popular first.
func (p *Pop) Top(n int) []ItemID {
	if n > len(p.top.items) {
		n = len(p.top.items)
	}
	return p.top.items[:n]
}

func (p *Pop) SetPrefix(prefix string) { p.prefix = prefix }
func (p *Pop) Prefix() string          { return p.prefix }
func (p *Pop) Flush(kv KV) error       { return p.counts.flush(kv, p.prefix) }

func (p *Pop) Load(key, val []byte) error {
	k := key[len(p.prefix):]
	if err := p.counts.load(k, val); err != nil {
		return err
	}
	p.top.touch(binary.BigEndian.Uint32(k))
	return nil
}

// Rescale multiplies every count by f.
func (p *Pop) Rescale(f float64) { p.counts.rescale(f) }

// DirtyBytes estimates the next flush's size.
func (p *Pop) DirtyBytes() int { return 20 * len(p.counts.dirty) }

// LoadBound implements ItemBounded.
func (p *Pop) LoadBound(n int) { p.counts.bound = n }

// LoadedItems implements ItemBounded.
func (p *Pop) LoadedItems() int { return p.counts.seen }
