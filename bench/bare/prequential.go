package bare

import "waymark/stream"

// PrequentialSR is the prequential evaluation of Sequential Rules written
// plainly: before each click of a session that has a previous item, rank
// the previous item's rules by weight, note where the clicked item falls
// in the top K, then add 1/gap to the rule from each of the session's last
// Window items to the clicked one. Rules live in one Go map per item, with
// no cap, no decay and no time ordering (the file is taken as it comes).
// It keeps HitRate@K and MRR@K and nothing else.
type PrequentialSR struct {
	K, Window int

	ids      map[string]uint32
	rows     []map[uint32]float64
	sessions map[string][]uint32
	top      []ruleEntry

	Asked, Hits int
	RRSum       float64
}

type ruleEntry struct {
	item uint32
	w    float64
}

// NewPrequentialSR returns an evaluation at K with sr's default window, 5.
func NewPrequentialSR(k int) *PrequentialSR {
	return &PrequentialSR{K: k, Window: 5, ids: map[string]uint32{}, sessions: map[string][]uint32{}}
}

// Add asks for and then learns one event.
func (p *PrequentialSR) Add(ev *stream.Event) {
	id, ok := p.ids[ev.Item]
	if !ok {
		id = uint32(len(p.ids))
		p.ids[ev.Item] = id
		p.rows = append(p.rows, nil)
	}
	w := p.sessions[ev.Session]
	n := len(w)
	if n > 0 && w[n-1] == id {
		return
	}
	if n > 0 {
		p.Asked++
		if r := p.rank(w[n-1], id); r > 0 {
			p.Hits++
			p.RRSum += 1 / float64(r)
		}
	}
	for gap := 1; gap <= p.Window && gap <= n; gap++ {
		a := w[n-gap]
		if a == id {
			continue
		}
		if p.rows[a] == nil {
			p.rows[a] = map[uint32]float64{}
		}
		p.rows[a][id] += 1 / float64(gap)
	}
	if n == p.Window {
		copy(w, w[1:])
		w = w[:n-1]
	}
	p.sessions[ev.Session] = append(w, id)
}

// rank returns target's 1-based place among the top K rules from last
// (heavier first, then lower id), or 0 when it is not among them. It keeps
// the K best in a small sorted slice.
func (p *PrequentialSR) rank(last, target uint32) int {
	top := p.top[:0]
	for it, w := range p.rows[last] {
		if len(top) == p.K && !heavierRule(ruleEntry{it, w}, top[len(top)-1]) {
			continue
		}
		i := len(top)
		if len(top) < p.K {
			top = append(top, ruleEntry{})
		} else {
			i--
		}
		for ; i > 0 && heavierRule(ruleEntry{it, w}, top[i-1]); i-- {
			top[i] = top[i-1]
		}
		top[i] = ruleEntry{it, w}
	}
	p.top = top
	for i, e := range top {
		if e.item == target {
			return i + 1
		}
	}
	return 0
}

func heavierRule(a, b ruleEntry) bool { return a.w > b.w || (a.w == b.w && a.item < b.item) }

// HitRate and MRR return the evaluation's figures so far.
func (p *PrequentialSR) HitRate() float64 { return float64(p.Hits) / float64(max(p.Asked, 1)) }

// MRR returns the mean reciprocal rank at K.
func (p *PrequentialSR) MRR() float64 { return p.RRSum / float64(max(p.Asked, 1)) }

// PrequentialFile runs the evaluation over a JSON-lines file, decoding each
// line with the project's decoder as DecodeFile does.
func PrequentialFile(path string, k int) (*PrequentialSR, int, error) {
	p := NewPrequentialSR(k)
	n, err := eachEvent(path, p.Add)
	return p, n, err
}
