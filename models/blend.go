package models

import (
	"fmt"
	"slices"
	"strings"
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
// too few candidates; when no other signal has any (an empty session, or
// only unknown items) the answer comes from popularity alone.
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

// contentFactor returns a signal's weight multiplier for candidate id: the
// back-off for a content signal, 1 otherwise.
func (b *Blend) contentFactor(s *Signal, q *Query, id ItemID) float64 {
	if b.backoff <= 0 {
		return 1
	}
	if _, ok := s.Model.(*Content); !ok {
		return 1
	}
	last, ok := q.Last()
	if !ok {
		return 1
	}
	n := min(b.pop.Count(last), b.pop.Count(id))
	n = b.cat.decayed(n, q.Now)
	return b.backoff / (b.backoff + n)
}

// DefaultPopWeight is popularity's weight in the default blend: enough to
// order otherwise tied candidates and to fill short lists, too small to
// outvote a session's own evidence.
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
func (b *Blend) Candidates(q *Query, out Scores) {
	b.blend(q, popTopN, out, nil, nil, Budget{})
}

// ScoreItems writes the blended score of each item.
func (b *Blend) ScoreItems(q *Query, items []ItemID, out []float64) {
	rows := b.Score(q, items)
	for i := range rows {
		out[i] = rows[i].Score
	}
}

// blend fills out with blended scores of items for which skip is false;
// when feats is non-nil it also keeps each candidate's features, indexed
// like Signals. Popularity fills up to popN items. It reports whether any
// signal other than popularity had candidates, and the signals the budget
// skipped.
func (b *Blend) blend(q *Query, popN int, out Scores, feats map[ItemID][]float64, skip func(ItemID) bool, bu Budget) (collab bool, skipped []string) {
	nf := len(b.signals) + 1
	part := make(Scores)
	for si := range b.signals {
		s := &b.signals[si]
		if !bu.allows(time.Duration(b.cost[si].Load())) {
			skipped = append(skipped, s.Name)
			continue
		}
		start := time.Now()
		clear(part)
		s.Model.Candidates(q, part)
		d := int64(time.Since(start))
		b.cost[si].Store((b.cost[si].Load()*7 + d) / 8)
		mx := normaliser(s.Model, maxScore(part))
		if mx <= 0 {
			continue
		}
		collab = true
		for id, v := range part {
			f := v / mx
			out[id] += s.Weight * b.contentFactor(s, q, id) * f
			if feats != nil {
				fv := feats[id]
				if fv == nil {
					fv = make([]float64, nf)
					feats[id] = fv
				}
				fv[si] = f
			}
		}
	}
	// Unavailable and skipped items leave before popularity fills, so the
	// fill counts only items that can be shown.
	for id := range out {
		if !b.available(id) || (skip != nil && skip(id)) {
			delete(out, id)
			delete(feats, id)
		}
	}
	all := b.pop.Top(popTopN)
	if len(all) == 0 {
		return collab, skipped
	}
	mx := b.pop.Count(all[0])
	addPop := func(id ItemID) {
		f := b.pop.Count(id) / mx
		out[id] += b.popW * f
		if feats != nil {
			fv := feats[id]
			if fv == nil {
				fv = make([]float64, nf)
				feats[id] = fv
			}
			fv[nf-1] = f
		}
	}
	// Popularity as a feature of every candidate the others found...
	for id := range out {
		addPop(id)
	}
	// ...and as a source of candidates to fill the list.
	filled := 0
	for _, id := range all {
		if filled == popN {
			break
		}
		if !b.available(id) || (skip != nil && skip(id)) {
			continue
		}
		filled++
		if _, ok := out[id]; !ok {
			addPop(id)
		}
	}
	return collab, skipped
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

func maxScore(s Scores) float64 {
	mx := 0.0
	for _, v := range s {
		if v > mx {
			mx = v
		}
	}
	return mx
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
	out := make(Scores)
	b.blend(q, k, out, nil, skip, Budget{})
	return TopK(dst, out, k, nil)
}

// Explain is Recommend with each item's features, within a time budget.
func (b *Blend) Explain(q *Query, k int, skip func(ItemID) bool, bu Budget) Result {
	out := make(Scores)
	feats := make(map[ItemID][]float64)
	collab, skipped := b.blend(q, k, out, feats, skip, bu)
	items := TopK(nil, out, k, nil)
	res := Result{Items: items, Fallback: !collab, Skipped: skipped, Features: make([][]float64, len(items))}
	for i, it := range items {
		res.Features[i] = feats[it.Item]
	}
	return res
}

// ScoreRow is one caller-supplied candidate's blended score and features.
type ScoreRow struct {
	Score    float64
	Features []float64
}

// Score computes the blended score and features of each given candidate, in
// the order given. Features are normalised exactly as in Recommend, so the
// two answers agree.
func (b *Blend) Score(q *Query, items []ItemID) []ScoreRow {
	nf := len(b.signals) + 1
	rows := make([]ScoreRow, len(items))
	raw := make([]float64, len(items))
	part := make(Scores)
	for i := range rows {
		rows[i].Features = make([]float64, nf)
	}
	for si := range b.signals {
		s := &b.signals[si]
		clear(part)
		s.Model.Candidates(q, part)
		mx := maxScore(part)
		s.Model.ScoreItems(q, items, raw)
		// A signal may score items it would not propose; keep features
		// within [0, 1] all the same.
		mx = normaliser(s.Model, max(mx, slices.Max(append(raw[:len(raw):len(raw)], 0))))
		if mx <= 0 {
			continue
		}
		for i, v := range raw {
			f := v / mx
			rows[i].Features[si] = f
			rows[i].Score += s.Weight * b.contentFactor(s, q, items[i]) * f
		}
	}
	if top := b.pop.Top(1); len(top) == 1 {
		mx := b.pop.Count(top[0])
		for i, id := range items {
			f := b.pop.Count(id) / mx
			rows[i].Features[nf-1] = f
			rows[i].Score += b.popW * f
		}
	}
	return rows
}
