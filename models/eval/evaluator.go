package eval

import (
	"time"

	"waymark/models"
	"waymark/store"
)

// positions are the session-position breakdown's groups: the query after
// the session's first, second, third, and fourth or later click.
var positionLabels = [...]string{"1", "2", "3", "4+"}

// modelEval accumulates one model's scores.
type modelEval struct {
	spec     string
	rec      models.Recommender
	params   map[string]string
	n        int64
	answered int64
	sum      []QueryScore // per cut-off
	pop      []float64    // per cut-off: sum over answered queries of mean popularity
	coldN    int64
	cold     []QueryScore
	posN     [len(positionLabels)]int64
	pos      [len(positionLabels)][]QueryScore
	best     []uint16  // per log item: best rank ever recommended, 0 never
	rr       []float32 // per query: reciprocal rank at the largest cut-off
	lat      latencyHist
	buf      []models.Scored
}

// evaluator asks every model the same queries and keeps the scores.
type evaluator struct {
	ks    []int
	maxK  int
	disc  []float64
	ms    []*modelEval
	cold  int64
	items int // catalogue size: distinct items of the kept events
	names []string

	popCount []int64 // learned clicks per log item
	maxPop   int64

	dict   *store.Dict
	itemOf map[string]uint32 // log item by name
	logOf  []int32           // log item by dictionary id, -1 if not in the log
	dictOf []uint32          // dictionary id + 1 by log item, 0 until looked up and found

	rel  []bool
	pops []float64
	out  []QueryScore
	ans  []uint32 // score's answers, between ask and tally
}

func newEvaluator(l *Log, o *Options, items int) *evaluator {
	e := &evaluator{
		ks:       o.K,
		maxK:     o.K[len(o.K)-1],
		disc:     discounts(o.K[len(o.K)-1]),
		cold:     int64(o.ColdThreshold),
		items:    items,
		names:    l.items,
		popCount: make([]int64, len(l.items)),
		itemOf:   make(map[string]uint32, len(l.items)),
		dictOf:   make([]uint32, len(l.items)),
		out:      make([]QueryScore, len(o.K)),
	}
	for i, s := range l.items {
		e.itemOf[s] = uint32(i)
	}
	for _, spec := range o.Models {
		m := &modelEval{
			spec: spec,
			sum:  make([]QueryScore, len(o.K)),
			pop:  make([]float64, len(o.K)),
			cold: make([]QueryScore, len(o.K)),
			best: make([]uint16, len(l.items)),
		}
		for i := range m.pos {
			m.pos[i] = make([]QueryScore, len(o.K))
		}
		e.ms = append(e.ms, m)
	}
	return e
}

// bind points the evaluator at a pipeline's recommenders and dictionary.
func (e *evaluator) bind(p interface {
	Recommender(string) (models.Recommender, bool)
}, dict *store.Dict) {
	for _, m := range e.ms {
		m.rec, _ = p.Recommender(m.spec)
	}
	e.dict = dict
	e.logOf = e.logOf[:0]
	clear(e.dictOf)
}

// sync extends the dictionary-to-log map with ids interned since the last
// call.
func (e *evaluator) sync() {
	for id := len(e.logOf); id < e.dict.Len(); id++ {
		li, ok := e.itemOf[e.dict.Name(uint32(id))]
		if !ok {
			e.logOf = append(e.logOf, -1)
			continue
		}
		e.logOf = append(e.logOf, int32(li))
	}
}

// dictID returns the dictionary id of log item li, if interned. An id once
// found is kept: a dictionary never renumbers, and the lookup hashes the
// item's name, which every query would otherwise pay for.
func (e *evaluator) dictID(li uint32) (models.ItemID, bool) {
	if id := e.dictOf[li]; id > 0 {
		return id - 1, true
	}
	id, ok := e.dict.Lookup(e.names[li])
	if ok {
		e.dictOf[li] = id + 1
	}
	return id, ok
}

// learned counts a click the models learned, for popularity and coldness.
func (e *evaluator) learned(li uint32) {
	e.popCount[li]++
	e.maxPop = max(e.maxPop, e.popCount[li])
}

func (e *evaluator) resetCounts() {
	clear(e.popCount)
	e.maxPop = 0
}

// score asks every model q and scores the answers. rel tells a relevant
// log item, nRel counts them; next is the clicked item that decides
// coldness; pos is the number of clicks before the query.
func (e *evaluator) score(q *models.Query, skip func(models.ItemID) bool, rel func(li uint32) bool, nRel int, next uint32, pos int) {
	e.ans = e.ask(q, skip, e.ans[:0])
	e.sync()
	e.tally(e.ans, e.logOf, rel, nRel, next, pos)
}

// ask asks every model q and appends the answers to dst: for each model in
// turn the length of its list, then its items' dictionary ids. It is the
// half of scoring that reads the models; tally, the other half, reads only
// what ask wrote and a map from dictionary ids to log items, so the two may
// run on different goroutines (tallier).
func (e *evaluator) ask(q *models.Query, skip func(models.ItemID) bool, dst []uint32) []uint32 {
	for _, m := range e.ms {
		t0 := time.Now()
		m.buf = m.rec.Recommend(q, e.maxK, skip, m.buf[:0])
		m.lat.add(time.Since(t0))
		list := m.buf
		if len(list) > e.maxK {
			list = list[:e.maxK]
		}
		dst = append(dst, uint32(len(list)))
		for _, s := range list {
			dst = append(dst, s.Item)
		}
	}
	return dst
}

// tally scores one query's answers as ask wrote them at the front of ans
// and returns the rest of ans. logOf maps dictionary ids to log items (-1:
// not in the log) and covers every id answered; the other arguments are
// score's.
func (e *evaluator) tally(ans []uint32, logOf []int32, rel func(li uint32) bool, nRel int, next uint32, pos int) []uint32 {
	cold := e.popCount[next] < e.cold
	pg := min(pos, len(positionLabels)) - 1
	for _, m := range e.ms {
		n := int(ans[0])
		list := ans[1 : 1+n]
		ans = ans[1+n:]
		e.rel, e.pops = e.rel[:0], e.pops[:0]
		for rank, id := range list {
			li := int32(-1)
			if int(id) < len(logOf) {
				li = logOf[id]
			}
			isRel := false
			popv := 0.0
			if li >= 0 {
				isRel = rel(uint32(li))
				if b := m.best[li]; b == 0 || int(b) > rank+1 {
					m.best[li] = uint16(rank + 1)
				}
				if e.maxPop > 0 {
					popv = float64(e.popCount[li]) / float64(e.maxPop)
				}
			}
			e.rel = append(e.rel, isRel)
			e.pops = append(e.pops, popv)
		}
		scoreCuts(e.rel, nRel, e.ks, e.disc, e.out)
		m.n++
		for j, s := range e.out {
			addScore(&m.sum[j], s)
		}
		if len(list) > 0 {
			m.answered++
			for j, k := range e.ks {
				n := min(k, len(list))
				s := 0.0
				for _, v := range e.pops[:n] {
					s += v
				}
				m.pop[j] += s / float64(n)
			}
		}
		if cold {
			m.coldN++
			for j, s := range e.out {
				addScore(&m.cold[j], s)
			}
		}
		if pg >= 0 {
			m.posN[pg]++
			for j, s := range e.out {
				addScore(&m.pos[pg][j], s)
			}
		}
		m.rr = append(m.rr, float32(e.out[len(e.out)-1].RR))
	}
	return ans
}

func addScore(dst *QueryScore, s QueryScore) {
	dst.Hit += s.Hit
	dst.RR += s.RR
	dst.NDCG += s.NDCG
	dst.Precision += s.Precision
	dst.Recall += s.Recall
}
