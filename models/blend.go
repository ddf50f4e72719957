package models

import (
	"fmt"
	"slices"
	"strings"
	"sync"
	"sync/atomic"
	"time"
)

// Recommender ranks next items for a session.
type Recommender interface {
	// Recommend appends to dst the k best items for q for which skip is
	// false (skip may be nil), best first.
	Recommend(q *Query, k int, skip func(ItemID) bool, dst []Scored) []Scored
}

// AsRecommender ranks a single model's own candidates, with no fallback, so
// a baseline is exactly what its name says.
func AsRecommender(m Model) Recommender {
	if r, ok := m.(Recommender); ok {
		return r
	}
	return single{m, new(scoresPool)}
}

type single struct {
	m    Model
	pool *scoresPool
}

func (s single) Recommend(q *Query, k int, skip func(ItemID) bool, dst []Scored) []Scored {
	out := s.pool.get()
	defer s.pool.put(out)
	s.m.Candidates(q, out)
	return TopK(dst, out, k, skip)
}

// Signal is one model inside a blend.
type Signal struct {
	Name   string // feature name, for example "sr"
	Model  Model
	Weight float64
}

// Blend combines signals: each signal's scores for a query are divided by
// that signal's best score, so every feature lies in [0, 1], and the blended
// score is the weighted sum of the features. Popularity takes part as one
// more signal with a small weight and fills the list when the others have
// too few candidates; fills always rank below the candidates with evidence
// (issue 13: a popular item never seen after the session's items must not
// outrank one that was). When no other signal has any candidate (an empty
// session, or only unknown items) the answer comes from popularity alone.
//
// Content back-off: a content signal (a [Content] model) speaks for pairs
// that clicks cannot yet judge. For the session's last item a and a
// candidate c its weight is
//
//	w_content · n0 / (n0 + min(n_a, n_c))
//
// where n_x is x's decayed click count at query time (from popularity) and
// n0 the back-off constant (DefaultContentBackoff). A pair with a new item
// on either side gets the full content weight, so an unclicked item is
// shown beside the items it resembles and a session ending on it gets its
// look-alikes; as both items gather clicks the collaborative signals, whose
// weights stay fixed, take over. With n0 = 10, an item with 10 clicks gets
// half the content weight and one with 90 a tenth.
//
// Availability: with a [Catalog] attached (a blend built by a [Set] always
// has one) items the catalogue marks unavailable never appear in
// Candidates, Recommend or Explain, and popularity fills past them.
type Blend struct {
	signals []Signal
	pop     *Pop
	popW    float64
	cat     *Catalog // nil: every item is available
	backoff float64  // n0 of the content back-off; 0: none
	// cost holds each signal's recent query time in nanoseconds (a
	// moving average), to skip a signal that would overrun a budget.
	cost []atomic.Int64
	// scratch recycles *blendScratch across queries.
	scratch sync.Pool
	// learn chooses the weights of a learned blend (blendlearn.go); nil
	// for fixed weights.
	learn *BlendLearner
}

// DefaultContentBackoff is n0 of the content back-off: the decayed click
// count at which content keeps half its weight (chosen here; replay tunes
// it).
const DefaultContentBackoff = 10

// setColdStart attaches the catalogue used for availability and the
// content back-off constant n0 (0 turns the back-off off).
func (b *Blend) setColdStart(cat *Catalog, n0 float64) {
	b.cat, b.backoff = cat, n0
}

// available reports whether id may be recommended.
func (b *Blend) available(id ItemID) bool { return b.cat == nil || b.cat.Available(id) }

// DefaultPopWeight is popularity's weight in the default blend, as a
// feature of the candidates other signals found: it orders candidates with
// similar evidence. Whatever its size, it never lifts an item no other
// signal proposed (a popularity fill) above one they did: fills rank below
// every candidate with evidence (see fillScore). A weight of 0
// turns fills off.
const DefaultPopWeight = 0.1

// NewBlend returns a blend of signals over a popularity model.
func NewBlend(pop *Pop, popWeight float64, signals ...Signal) *Blend {
	return &Blend{signals: signals, pop: pop, popW: popWeight, cost: make([]atomic.Int64, len(signals))}
}

// addSignal adds a signal while the blend is being built, before any query.
func (b *Blend) addSignal(sig Signal) {
	b.signals = append(b.signals, sig)
	b.cost = make([]atomic.Int64, len(b.signals))
}

// Budget limits one query's time. A signal whose recent query time would
// take the query past Deadline is skipped and named in the result.
type Budget struct {
	Deadline time.Time // zero: no limit
}

func (bu Budget) allows(expect time.Duration) bool {
	return bu.Deadline.IsZero() || time.Now().Add(expect).Before(bu.Deadline)
}

// Name lists the blend's parts and weights.
func (b *Blend) Name() string {
	if b.learn != nil {
		return learnedName // the weights change with the stream: see Stats
	}
	parts := make([]string, 0, len(b.signals)+1)
	for _, s := range b.signals {
		parts = append(parts, fmt.Sprintf("%s=%g", s.Name, s.Weight))
	}
	parts = append(parts, fmt.Sprintf("pop=%g", b.popW))
	return "blend(" + strings.Join(parts, ",") + ")"
}

// Signals returns the feature names in the order features are reported,
// popularity last.
func (b *Blend) Signals() []string {
	names := make([]string, 0, len(b.signals)+1)
	for _, s := range b.signals {
		names = append(names, s.Name)
	}
	return append(names, "pop")
}

// Observe does nothing: a blend learns through its parts, which the
// pipeline feeds once each.
func (b *Blend) Observe(*Observation) {}

// Candidates adds blended scores of every signal's candidates and the top
// popular items.
func (b *Blend) Candidates(q *Query, out *Scores) {
	sc := b.getScratch()
	defer b.scratch.Put(sc)
	b.blend(q, popTopN, sc, nil, Budget{})
	for _, e := range sc.out.Entries() {
		if b.available(e.Item) {
			out.Add(e.Item, e.Score)
		}
	}
}

// ScoreItems writes the blended score of each item.
func (b *Blend) ScoreItems(q *Query, items []ItemID, out []float64) {
	rows := b.Score(q, items)
	for i := range rows {
		out[i] = rows[i].Score
	}
}

// blendScratch is one query's working memory, reused across queries so a
// query allocates nothing for its candidates.
type blendScratch struct {
	out   Scores    // blended scores
	parts []Scores  // each signal's raw scores
	norm  []float64 // each signal's normaliser; 0: no candidates or skipped
	popMx float64   // popularity's normaliser; 0: no popular items
	// floor is the lowest positive blended score among the candidates
	// with evidence; 0: none (fills then score by popularity alone).
	floor float64
	top   []Scored
	items []ItemID
	raw   []float64
	// answered maps the answered items to their rows in features.
	answered Scores
}

func (b *Blend) getScratch() *blendScratch {
	sc, _ := b.scratch.Get().(*blendScratch)
	if sc == nil {
		sc = new(blendScratch)
	}
	if len(sc.parts) != len(b.signals) {
		sc.parts = make([]Scores, len(b.signals))
		sc.norm = make([]float64, len(b.signals))
	}
	sc.out.Reset()
	return sc
}

// blend fills sc.out with the blended scores of every signal's candidates
// and of up to popN popular items for which skip is false, and sc.parts and
// sc.norm with what features need. Candidates that are unavailable or
// skipped stay in sc.out (removing them would cost more than ranking past
// them); callers rank with b.keep. It reports whether any signal other than
// popularity had candidates, and the signals the budget skipped.
func (b *Blend) blend(q *Query, popN int, sc *blendScratch, skip func(ItemID) bool, bu Budget) (collab bool, skipped []string) {
	w, popW := b.weightsFor(skip)
	collab, skipped = b.evidence(q, sc, bu, w, popW)
	if sc.popMx == 0 {
		return collab, skipped
	}
	// Popularity as a source of candidates to fill the list, counting
	// only items that can be shown.
	filled := 0
	for _, id := range b.pop.Top(popTopN) {
		if filled == popN {
			break
		}
		if !b.keep(id, skip) {
			continue
		}
		filled++
		if _, ok := sc.out.Lookup(id); !ok {
			sc.out.Set(id, fillScore(sc.floor, popW, b.pop.Count(id)/sc.popMx))
		}
	}
	return collab, skipped
}

// fillScore is the score of a popularity fill of relative popularity f in
// (0, 1]: with candidates of evidence, half the weakest one's score times
// f, so every fill ranks below every candidate with evidence and fills
// keep their popularity order; without any, popularity's own weighted
// feature. A popularity weight of 0 gives 0: no fills.
func fillScore(floor, popW, f float64) float64 {
	if popW <= 0 {
		return 0
	}
	if floor > 0 {
		return floor * f / 2
	}
	return popW * f
}

// evidence fills sc.out with the blended scores of every signal's
// candidates (popularity included as their feature), sc.parts and sc.norm
// with what features need, sc.popMx and sc.floor. w and popW are the
// weights (weightsFor): w nil means each signal's own. It reports whether
// any signal other than popularity had candidates, and the signals the
// budget skipped.
func (b *Blend) evidence(q *Query, sc *blendScratch, bu Budget, w []float64, popW float64) (collab bool, skipped []string) {
	sc.floor = 0
	for si := range b.signals {
		s := &b.signals[si]
		part := &sc.parts[si]
		part.Reset()
		sc.norm[si] = 0
		wt := s.Weight
		if w != nil {
			// A learned blend asks only the signals its mixture weighs.
			if wt = w[si]; wt == 0 {
				continue
			}
		}
		if !bu.allows(time.Duration(b.cost[si].Load())) {
			skipped = append(skipped, s.Name)
			continue
		}
		start := time.Now()
		s.Model.Candidates(q, part)
		d := int64(time.Since(start))
		b.cost[si].Store((b.cost[si].Load()*7 + d) / 8)
		mx := normaliser(s.Model, part.Max())
		if mx <= 0 {
			continue
		}
		sc.norm[si] = mx
		collab = true
		// The arithmetic is Score's, term for term, so the two agree.
		if cf, ok := b.contentBackoff(s, q); ok {
			for _, e := range part.Entries() {
				sc.out.Add(e.Item, wt*cf(e.Item)*(e.Score/mx))
			}
			continue
		}
		for _, e := range part.Entries() {
			sc.out.Add(e.Item, wt*(e.Score/mx))
		}
	}
	sc.popMx = 0
	if top := b.pop.Top(1); len(top) == 1 {
		sc.popMx = b.pop.Count(top[0])
	}
	// Popularity as a feature of every candidate the others found.
	ents := sc.out.Entries()
	for i := range ents {
		if sc.popMx > 0 {
			ents[i].Score += popW * (b.pop.Count(ents[i].Item) / sc.popMx)
		}
		if v := ents[i].Score; v > 0 && (sc.floor == 0 || v < sc.floor) {
			sc.floor = v
		}
	}
	return collab, skipped
}

// keep reports whether id may be in an answer.
func (b *Blend) keep(id ItemID, skip func(ItemID) bool) bool {
	return b.available(id) && (skip == nil || !skip(id))
}

// contentBackoff returns the content back-off factor of candidates for a
// content signal (see the type doc), or false for any other signal or when
// there is no back-off.
func (b *Blend) contentBackoff(s *Signal, q *Query) (func(ItemID) float64, bool) {
	if b.backoff <= 0 {
		return nil, false
	}
	if _, ok := s.Model.(*Content); !ok {
		return nil, false
	}
	last, ok := q.Last()
	if !ok {
		return nil, false
	}
	nLast := b.pop.Count(last)
	return func(id ItemID) float64 {
		n := b.cat.decayed(min(nLast, b.pop.Count(id)), q.Now)
		return b.backoff / (b.backoff + n)
	}, true
}

// features returns the answered items' features from a query's scratch,
// one row per item indexed like Signals. A signal's table that was only
// appended to (see [Scores.Append]) is walked once against the answers
// instead of being indexed for k lookups: indexing costs a probe per
// candidate, the walk a probe into a table of k.
func (b *Blend) features(sc *blendScratch, items []Scored) [][]float64 {
	nf := len(b.signals) + 1
	flat := make([]float64, nf*len(items))
	fvs := make([][]float64, len(items))
	for i := range fvs {
		fvs[i] = flat[i*nf : (i+1)*nf : (i+1)*nf]
	}
	var pos *Scores // answered item → its row, built on first need
	for si := range b.signals {
		mx := sc.norm[si]
		if mx <= 0 {
			continue
		}
		part := &sc.parts[si]
		if part.Indexed() {
			for i, it := range items {
				fvs[i][si] = part.Get(it.Item) / mx
			}
			continue
		}
		if pos == nil {
			pos = &sc.answered
			pos.Reset()
			for i, it := range items {
				pos.Set(it.Item, float64(i))
			}
		}
		for _, e := range part.Entries() {
			if i, ok := pos.Lookup(e.Item); ok {
				fvs[int(i)][si] = e.Score / mx
			}
		}
	}
	if sc.popMx > 0 {
		for i, it := range items {
			fvs[i][nf-1] = b.pop.Count(it.Item) / sc.popMx
		}
	}
	return fvs
}

// absolute is a model whose scores are already on the blend's [0, 1]
// scale and carry meaning in their size, so the blend must not divide them
// by the query's best: the prior's import weight and its fading as local
// clicks arrive would cancel.
type absolute interface {
	absoluteScores()
}

// normaliser returns what a signal's scores are divided by: their best,
// or 1 for a model with absolute scores that have any candidate.
func normaliser(m Model, best float64) float64 {
	if _, ok := m.(absolute); ok && best > 0 {
		return 1
	}
	return best
}

// Result is a ranked answer with per-signal features.
type Result struct {
	Items    []Scored
	Features [][]float64 // per item, indexed like Signals
	// Fallback is true when only popularity answered.
	Fallback bool
	// Skipped names the signals left out to stay within the budget.
	Skipped []string
}

// Recommend ranks the k best items for q, skipping items for which skip is
// true.
func (b *Blend) Recommend(q *Query, k int, skip func(ItemID) bool, dst []Scored) []Scored {
	sc := b.getScratch()
	defer b.scratch.Put(sc)
	b.blend(q, k, sc, skip, Budget{})
	return TopK(dst, &sc.out, k, func(id ItemID) bool { return !b.keep(id, skip) })
}

// Explain is Recommend with each item's features, within a time budget.
func (b *Blend) Explain(q *Query, k int, skip func(ItemID) bool, bu Budget) Result {
	sc := b.getScratch()
	defer b.scratch.Put(sc)
	collab, skipped := b.blend(q, k, sc, skip, bu)
	items := TopK(nil, &sc.out, k, func(id ItemID) bool { return !b.keep(id, skip) })
	return Result{Items: items, Fallback: !collab, Skipped: skipped, Features: b.features(sc, items)}
}

// ScoreRow is one caller-supplied candidate's blended score and features.
type ScoreRow struct {
	Score    float64
	Features []float64
}

// Score computes the blended score and features of each given candidate, in
// the order given. Features are normalised exactly as in Recommend, so the
// two answers agree; a candidate no signal but popularity speaks for scores
// as a popularity fill of the same query would, below every candidate with
// evidence.
func (b *Blend) Score(q *Query, items []ItemID) []ScoreRow {
	nf := len(b.signals) + 1
	rows := make([]ScoreRow, len(items))
	feats := make([]float64, nf*len(items))
	for i := range rows {
		rows[i].Features = feats[i*nf : (i+1)*nf : (i+1)*nf]
	}
	sc := b.getScratch()
	defer b.scratch.Put(sc)
	sc.raw = slices.Grow(sc.raw[:0], len(items))[:len(items)]
	raw := sc.raw
	w, popW := b.weightsFor(func(ItemID) bool { return false })
	b.evidence(q, sc, Budget{}, w, popW) // each signal's candidates, and the fills' floor
	evidenced := make([]bool, len(items))
	for si := range b.signals {
		s := &b.signals[si]
		wt := s.Weight
		if w != nil {
			wt = w[si]
		}
		part := &sc.parts[si]
		s.Model.ScoreItems(q, items, raw)
		// A signal may score items it would not propose; keep features
		// within [0, 1] all the same.
		mx := part.Max()
		for _, v := range raw {
			mx = max(mx, v)
		}
		mx = normaliser(s.Model, mx)
		if mx <= 0 {
			continue
		}
		cf, content := b.contentBackoff(s, q)
		for i, v := range raw {
			f := v / mx
			rows[i].Features[si] = f
			evidenced[i] = evidenced[i] || (f > 0 && wt > 0)
			if content {
				rows[i].Score += wt * cf(items[i]) * f
			} else {
				rows[i].Score += wt * f
			}
		}
	}
	if mx := sc.popMx; mx > 0 {
		for i, id := range items {
			f := b.pop.Count(id) / mx
			rows[i].Features[nf-1] = f
			switch {
			case evidenced[i]:
				rows[i].Score += popW * f
			case f > 0:
				rows[i].Score = fillScore(sc.floor, popW, f)
			}
		}
	}
	return rows
}
