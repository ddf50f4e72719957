package models

import (
	"fmt"
	"math"
	"slices"
)

// Prior holds item-to-item statistics imported from another deployment (a
// site in another region, an older catalogue) so a new site answers from
// its first event. Imported neighbour weights are kept as given (each
// exporting model's scores scaled to [0, 1] per item, times the import
// weight) and fade as local data arrives: for the session's last item a,
//
//	score(a → b) = prior(a, b) · n0 / (n0 + n_a)
//
// with n_a the decayed local click count of a and n0 the spec's n0
// (default 20). An item with n0 local clicks keeps half its prior; the
// collaborative signals, learning from local clicks, take over. Inside a
// blend these scores count as they are (not divided by the query's best),
// so both the import weight and the fading show in the blended score.
type Prior struct {
	n0     float64
	rows   *pairTable
	pop    *Pop
	decay  Decay
	prefix string
}

// NewPrior returns an empty prior that fades with n0 local clicks; pop
// supplies the local counts.
func NewPrior(n0 float64, pop *Pop) *Prior {
	return &Prior{n0: n0, rows: newPairTable(0), pop: pop}
}

func (p *Prior) Name() string { return fmt.Sprintf("prior(n0=%g)", p.n0) }

func (p *Prior) absoluteScores() {}

// Observe does nothing: local clicks reach the prior through popularity.
func (p *Prior) Observe(*Observation) {}

// ObservePrior takes imported neighbours of item, already scaled. Rows of
// several exporting models (iknn, markov, sr) for one pair keep the
// largest weight, so a pair's prior stays on the scale it was imported at.
func (p *Prior) ObservePrior(item ItemID, neighbors []Scored) {
	for _, n := range neighbors {
		if n.Item == item || !(n.Score > 0) || math.IsInf(n.Score, 0) {
			continue
		}
		if have := p.rows.get(item, n.Item); n.Score > have {
			p.rows.add(item, n.Item, n.Score-have)
		}
	}
}

// fade returns the prior's remaining share for a at now.
func (p *Prior) fade(a ItemID, now int64) float64 {
	n := p.pop.Count(a)
	if p.decay.HalfLifeMS > 0 {
		n *= p.decay.Factor(now)
	}
	return p.n0 / (p.n0 + n)
}

func (p *Prior) Candidates(q *Query, out *Scores) {
	last, ok := q.Last()
	if !ok {
		return
	}
	f := p.fade(last, q.Now)
	p.rows.each(last, func(b ItemID, w float64) { out.Add(b, w*f) })
}

func (p *Prior) ScoreItems(q *Query, items []ItemID, out []float64) {
	clear(out)
	last, ok := q.Last()
	if !ok {
		return
	}
	f := p.fade(last, q.Now)
	for i, b := range items {
		out[i] = p.rows.get(last, b) * f
	}
}

// Rows returns the number of items with imported neighbours.
func (p *Prior) Rows() int {
	n := 0
	for i := range p.rows.rows {
		if p.rows.rows[i].n > 0 {
			n++
		}
	}
	return n
}

func (p *Prior) SetDecay(d Decay)           { p.decay = d }
func (p *Prior) SetPrefix(prefix string)    { p.prefix = prefix }
func (p *Prior) Prefix() string             { return p.prefix }
func (p *Prior) Flush(kv KV) error          { return p.rows.flush(kv, p.prefix) }
func (p *Prior) Load(key, val []byte) error { return p.rows.load(key[len(p.prefix):], val) }

// PriorLearner is a model that takes imported neighbour lists.
type PriorLearner interface {
	ObservePrior(item ItemID, neighbors []Scored)
}

// Exporter is a model whose learned neighbours can be exported as priors
// for another deployment: scores of each item's neighbours at now, scaled
// so the item's best is 1.
type Exporter interface {
	Export(now int64, f func(item ItemID, neighbors []Scored) error) error
}

// exportTable walks a pair table row by row, scaling each row to its best.
func exportTable(t *pairTable, score func(a, b ItemID, w float64) float64, f func(ItemID, []Scored) error) error {
	for a := range t.rows {
		r := &t.rows[a]
		if r.n == 0 {
			continue
		}
		ns := make([]Scored, 0, r.n)
		best := 0.0
		r.each(func(b ItemID, w float64) {
			s := score(ItemID(a), b, w)
			if s > 0 {
				ns = append(ns, Scored{b, s})
				best = max(best, s)
			}
		})
		if best == 0 {
			continue
		}
		for i := range ns {
			ns[i].Score /= best
		}
		slices.SortFunc(ns, func(x, y Scored) int { return cmpScore(x.Score, y.Score, x.Item, y.Item) })
		if err := f(ItemID(a), ns); err != nil {
			return err
		}
	}
	return nil
}

// Export writes each item's co-visitation neighbours by cosine.
func (m *IKNN) Export(now int64, f func(ItemID, []Scored) error) error {
	return exportTable(m.covis, func(a, b ItemID, w float64) float64 { return m.sim(a, b, w, now) }, f)
}

// Export writes each item's transition weights.
func (m *Markov) Export(now int64, f func(ItemID, []Scored) error) error {
	return exportTable(m.trans, func(_, _ ItemID, w float64) float64 { return w }, f)
}

// Export writes each item's sequential-rule weights.
func (m *SR) Export(now int64, f func(ItemID, []Scored) error) error {
	return exportTable(m.rules, func(_, _ ItemID, w float64) float64 { return w }, f)
}
