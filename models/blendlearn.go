package models

import (
	"encoding/binary"
	"fmt"
	"math"
	"slices"
	"strings"
)

// A learned blend picks its weights from the stream itself. Fixed weights
// cannot be right across sites: on one click log sequential rules alone
// beat every mixture, on another only a session-kNN signal comes close to
// popularity (see bench/ACCURACY.md). So the default blend keeps a small
// pool of candidate mixtures, each single signal among them, and scores
// every one prequentially: for a sampled learned click whose session has a
// prefix, before any model learns the click, it ranks what each mixture
// would have answered and adds the clicked item's reciprocal rank at
// [LearnK] to that mixture's exponentially decayed sum (landmark form, the
// pipeline's half-life, in event time). Queries are answered by the
// mixture with the best decayed mean; ties go to the earlier mixture in
// pool order, so replicas that applied the same events agree.
//
// Two tables are kept, one per exclusion rule: a caller that leaves the
// session's own items out (serve's default) and one that lets them be
// answered (the k-fold protocol of replay) are scored apart, because which
// mixture is best differs between the two (a session-kNN signal earns most
// of its rank from items the session already holds).
//
// Content and prior, the cold-start signals, keep their fixed weights in
// every mixture: they propose nothing on a click log without catalogue
// records or priors.

// LearnK is the cut-off a learned blend scores its mixtures at (the
// replay default, common practice for next-item evaluation).
const LearnK = 20

// DefaultLearnEvery is how many eligible clicks pass between two
// evaluations of the pool. An evaluation asks every signal once (session
// kNN included), which costs as much as a query of each, 0.2–0.5 ms on the
// open logs; one click in eight keeps that near a twentieth of a
// millisecond per click on average and still scores the pool on tens of
// thousands of clicks of a small site's few months (e-shop: about 17,000).
const DefaultLearnEvery = 8

// popTie is the popularity weight of the pool's mixtures: it orders tied
// candidates by popularity and fills short lists in popularity order, yet
// no candidate with evidence falls below a fill.
const popTie = 1e-9

// mixture is one candidate of the pool: weights of the learned signals
// (absent: 0) and popularity's weight.
type mixture struct {
	name string
	w    map[string]float64
	pop  float64
}

// learnedSignals are the signals a learned blend weighs, in the order they
// are added after the default blend's own.
var learnedSignals = [...]string{"vsknn", "vstan"}

// learnedPool returns the candidate mixtures in tie-break order. The first
// is the former default (markov, sr and item-kNN at equal weights), so a
// learner with no evidence yet answers as before.
func learnedPool() []mixture {
	one := func(name string) mixture { return mixture{name, map[string]float64{name: 1}, popTie} }
	return []mixture{
		{"markov+sr+iknn", map[string]float64{"markov": 1, "sr": 1, "iknn": 1}, popTie},
		{"markov+sr+iknn+pop", map[string]float64{"markov": 1, "sr": 1, "iknn": 1}, DefaultPopWeight},
		one("sr"),
		one("markov"),
		one("iknn"),
		one("vstan"),
		one("vsknn"),
		{"pop", map[string]float64{}, 1},
		{"markov+sr", map[string]float64{"markov": 1, "sr": 1}, popTie},
		{"sr+vstan", map[string]float64{"sr": 1, "vstan": 1}, popTie},
		{"vsknn+vstan", map[string]float64{"vsknn": 1, "vstan": 1}, popTie},
		{"all", map[string]float64{"markov": 1, "sr": 1, "iknn": 1, "vsknn": 1, "vstan": 1}, popTie},
	}
}

// learnedName is a learned blend's name: its parts are fixed, its weights
// are the learner's current choice (BlendLearner.Stats).
const learnedName = "blend(learned=1)"

// Exclusion rules, the index of a learner's score tables.
const (
	ruleExclude = 0 // the session's items are left out (serve's default)
	ruleInclude = 1 // they may be answered
	nRules      = 2
)

var ruleNames = [nRules]string{"exclude_session", "include_session"}

// BlendLearner scores a learned blend's mixtures on the stream and sets
// the blend's weights. It is a learner of its own, placed before every
// other in [Set.Learners], so it sees each click before the signals learn
// it. Its state is a few numbers per mixture, stored under one key.
type BlendLearner struct {
	b     *Blend
	every uint64
	mixes []mixture
	// wv holds each mixture's weight per blend signal; signals the pool
	// does not weigh keep their own weight.
	wv [][]float64
	// seen counts eligible clicks (a prefix, not a repeat): the sample
	// is every every-th of them. evals counts evaluations.
	seen, evals uint64
	// Per rule: the decayed number of scored clicks, and per mixture
	// the decayed sums of reciprocal rank and of hits at LearnK.
	norm   [nRules]float64
	rr     [nRules][]float64
	hit    [nRules][]float64
	chosen [nRules]int
	prefix string
	dirty  bool
	sc     learnScratch
}

// learnScratch is one evaluation's working memory, kept across clicks.
type learnScratch struct {
	parts []Scores
	rows  Scores         // candidate item -> row number
	items []ItemID       // row -> item
	feats []float64      // row-major: row × signal, content back-off applied
	mask  []uint64       // row -> signals that proposed it
	popf  []float64      // row -> popularity feature
	fill  [nRules][]bool // per rule, row -> among the first LearnK kept popular items
	sess  []bool         // row -> in the session
}

// learnBlend turns b into a learned blend: it adds the session-kNN
// signals at weight 0 and registers b's learner under key, first among
// the set's learners.
func (s *Set) learnBlend(b *Blend, key string) error {
	for _, name := range learnedSignals {
		m, err := s.Get(name)
		if err != nil {
			return fmt.Errorf("learned blend part %q: %w", name, err)
		}
		b.addSignal(Signal{Name: name, Model: m})
	}
	l := newBlendLearner(b, DefaultLearnEvery)
	b.learn = l
	l.ready()
	key = "learn/" + key
	for n := 2; s.byName[key] != nil; n++ {
		key = fmt.Sprintf("learn/%s#%d", strings.TrimPrefix(key, "learn/"), n)
	}
	s.byName[key] = l
	s.learners = slices.Insert(s.learners, 0, Model(l))
	s.keys = slices.Insert(s.keys, 0, key)
	return nil
}

// NewLearnedBlend returns a learned blend of signals over pop that
// evaluates its pool on every every-th eligible click, and its learner,
// which the caller must let observe each click before the signals do.
// Pool mixtures name signals; a signal the pool does not name keeps its
// weight.
func NewLearnedBlend(pop *Pop, every int, signals ...Signal) (*Blend, *BlendLearner) {
	b := NewBlend(pop, DefaultPopWeight, signals...)
	l := newBlendLearner(b, every)
	b.learn = l
	l.ready()
	return b, l
}

func newBlendLearner(b *Blend, every int) *BlendLearner {
	l := &BlendLearner{b: b, every: uint64(max(every, 1)), mixes: learnedPool()}
	for r := range nRules {
		l.rr[r] = make([]float64, len(l.mixes))
		l.hit[r] = make([]float64, len(l.mixes))
	}
	return l
}

// ready builds the weight vectors once the blend's signals are final,
// before any query.
func (l *BlendLearner) ready() {
	pooled := map[string]bool{"markov": true, "sr": true, "iknn": true}
	for _, n := range learnedSignals {
		pooled[n] = true
	}
	l.wv = make([][]float64, len(l.mixes))
	for i, m := range l.mixes {
		w := make([]float64, len(l.b.signals))
		for si, s := range l.b.signals {
			if pooled[s.Name] {
				w[si] = m.w[s.Name]
			} else {
				w[si] = s.Weight
			}
		}
		l.wv[i] = w
	}
}

// weights returns the weights and popularity weight a query with the
// given exclusion answers with.
func (l *BlendLearner) weights(exclude bool) ([]float64, float64) {
	r := ruleInclude
	if exclude {
		r = ruleExclude
	}
	c := l.chosen[r]
	return l.wv[c], l.mixes[c].pop
}

// Name names the learner by its blend.
func (l *BlendLearner) Name() string { return "learn(" + l.b.Name() + ")" }

// Candidates proposes nothing: the learner only weighs the blend's parts.
func (l *BlendLearner) Candidates(*Query, *Scores) {}

// ScoreItems scores nothing (see Candidates).
func (l *BlendLearner) ScoreItems(_ *Query, _ []ItemID, out []float64) { clear(out) }

// Observe scores the pool on the click, if it is sampled, before the
// signals learn it.
func (l *BlendLearner) Observe(o *Observation) {
	if len(o.Window) == 0 || o.Repeat {
		return
	}
	l.seen++
	l.dirty = true
	if (l.seen-1)%l.every != 0 {
		return
	}
	q := Query{Session: o.Window, Now: o.TS, SessionNo: o.SessionNo}
	if !l.collect(&q) {
		return
	}
	l.evals++
	for r := range nRules {
		// With the session's items left out, a click on one of them is
		// a miss for every mixture: it tells them nothing apart.
		if r == ruleExclude && inSession(&q, o.Item) {
			continue
		}
		l.norm[r] += o.Weight
		for mi := range l.mixes {
			if rank := l.rank(mi, o.Item, r == ruleExclude); rank > 0 {
				l.rr[r][mi] += o.Weight / float64(rank)
				l.hit[r][mi] += o.Weight
			}
		}
		l.choose(r)
	}
}

func inSession(q *Query, id ItemID) bool {
	for _, s := range q.Session {
		if s.Item == id {
			return true
		}
	}
	return false
}

// choose picks rule r's mixture: the best decayed reciprocal-rank sum,
// the earliest on ties.
func (l *BlendLearner) choose(r int) {
	best := 0
	for mi, v := range l.rr[r] {
		if v > l.rr[r][best] {
			best = mi
		}
	}
	l.chosen[r] = best
}

// collect asks every signal of the blend once and fills the scratch rows
// with the union of their candidates and of the popular items. It mirrors
// Blend.blend's arithmetic term for term, so rank returns the rank the
// blend would answer with. It reports whether there are any rows.
func (l *BlendLearner) collect(q *Query) bool {
	b, sc := l.b, &l.sc
	ns := len(b.signals)
	if len(sc.parts) != ns {
		sc.parts = make([]Scores, ns)
	}
	sc.rows.Reset()
	sc.items, sc.feats, sc.mask = sc.items[:0], sc.feats[:0], sc.mask[:0]
	row := func(id ItemID) int {
		if v, ok := sc.rows.Lookup(id); ok {
			return int(v)
		}
		n := len(sc.items)
		sc.rows.Set(id, float64(n))
		sc.items = append(sc.items, id)
		for range ns {
			sc.feats = append(sc.feats, 0)
		}
		sc.mask = append(sc.mask, 0)
		return n
	}
	for si := range b.signals {
		s := &b.signals[si]
		part := &sc.parts[si]
		part.Reset()
		s.Model.Candidates(q, part)
		mx := normaliser(s.Model, part.Max())
		if mx <= 0 {
			continue
		}
		cf, content := b.contentBackoff(s, q)
		for _, e := range part.Entries() {
			r := row(e.Item)
			f := e.Score / mx
			if content {
				f *= cf(e.Item)
			}
			sc.feats[r*ns+si] += f
			sc.mask[r] |= 1 << uint(si)
		}
	}
	// Blend.blend fills with the first LearnK popular items that are
	// kept; which are kept depends on the exclusion rule, so each rule
	// has its own fill flags.
	for r := range nRules {
		clear(sc.fill[r])
		sc.fill[r] = sc.fill[r][:0]
	}
	all := b.pop.Top(popTopN)
	mx := 0.0
	if len(all) > 0 {
		mx = b.pop.Count(all[0])
	}
	var filled [nRules]int
	for _, id := range all {
		if filled[ruleInclude] == LearnK && filled[ruleExclude] == LearnK {
			break
		}
		if !b.available(id) {
			continue
		}
		in := inSession(q, id)
		var is [nRules]bool
		for r := range nRules {
			if filled[r] == LearnK || (r == ruleExclude && in) {
				continue
			}
			filled[r]++
			is[r] = true
		}
		if !is[ruleExclude] && !is[ruleInclude] {
			continue
		}
		row := row(id)
		for r := range nRules {
			for len(sc.fill[r]) <= row {
				sc.fill[r] = append(sc.fill[r], false)
			}
			sc.fill[r][row] = is[r]
		}
	}
	n := len(sc.items)
	sc.sess = slices.Grow(sc.sess[:0], n)[:n]
	sc.popf = slices.Grow(sc.popf[:0], n)[:n]
	for r, id := range sc.items {
		sc.sess[r] = inSession(q, id)
		sc.popf[r] = 0
		if mx > 0 {
			sc.popf[r] = b.pop.Count(id) / mx
		}
	}
	for r := range nRules {
		for len(sc.fill[r]) < n {
			sc.fill[r] = append(sc.fill[r], false)
		}
	}
	return n > 0
}

// rank returns target's 1-based rank at LearnK in mixture mi's answer, 0
// when it is not among the first LearnK. It follows Blend.blend and TopK:
// a row is a candidate when a weighted signal proposed it or when it is a
// fill; its score is the weighted features plus popularity's; items not
// kept, and scores of 0 or less, never rank; ties go to the lower id.
func (l *BlendLearner) rank(mi int, target ItemID, exclude bool) int {
	sc, ns := &l.sc, len(l.b.signals)
	w, popW := l.wv[mi], l.mixes[mi].pop
	rule := ruleInclude
	if exclude {
		rule = ruleExclude
	}
	var used uint64
	for si, v := range w {
		if v != 0 {
			used |= 1 << uint(si)
		}
	}
	tr := -1
	if v, ok := sc.rows.Lookup(target); ok {
		tr = int(v)
	}
	evidence := func(r int) float64 {
		s := 0.0
		f := sc.feats[r*ns : (r+1)*ns]
		for si, v := range w {
			if v != 0 {
				s += v * f[si]
			}
		}
		return s + popW*sc.popf[r]
	}
	// The fills' floor, as Blend.evidence finds it: the weakest positive
	// score among the candidates with evidence, excluded ones included.
	floor := 0.0
	for r := range sc.items {
		if sc.mask[r]&used != 0 {
			if v := evidence(r); v > 0 && (floor == 0 || v < floor) {
				floor = v
			}
		}
	}
	score := func(r int) float64 {
		if exclude && sc.sess[r] {
			return 0
		}
		if sc.mask[r]&used == 0 {
			// A fill: in Blend.blend only the first LearnK kept
			// popular items, which a fill row of the other rule may
			// not be; scored as fillScore scores it.
			if !sc.fill[rule][r] {
				return 0
			}
			return fillScore(floor, popW, sc.popf[r])
		}
		return evidence(r)
	}
	if tr < 0 {
		return 0
	}
	st := score(tr)
	if st <= 0 || !l.b.available(target) {
		return 0
	}
	rank := 1
	for r, id := range sc.items {
		if r == tr || !l.b.available(id) {
			continue
		}
		s := score(r)
		if s > st || (s == st && s > 0 && id < target) {
			rank++
			if rank > LearnK {
				return 0
			}
		}
	}
	return rank
}

// Rescale multiplies the decayed sums by f when the pipeline moves its
// decay reference.
func (l *BlendLearner) Rescale(f float64) {
	for r := range nRules {
		l.norm[r] *= f
		for i := range l.rr[r] {
			l.rr[r][i] *= f
			l.hit[r][i] *= f
		}
	}
	l.dirty = true
}

// LearnedStats is what a learned blend reports: the chosen mixture and
// weights per exclusion rule, and each mixture's decayed scores.
type LearnedStats struct {
	// Every is the sampling step: one eligible click in Every is scored.
	Every int `json:"every"`
	// Seen counts eligible clicks (with a prefix, not a repeat), Evaluated
	// the clicks the pool was scored on.
	Seen      uint64         `json:"eligible_clicks"`
	Evaluated uint64         `json:"evaluated_clicks"`
	Rules     []LearnedRule  `json:"rules"`
	Pool      []MixtureStats `json:"pool"`
}

// LearnedRule is the choice for one exclusion rule.
type LearnedRule struct {
	Rule    string             `json:"rule"`
	Chosen  string             `json:"chosen"`
	Weights map[string]float64 `json:"weights"`
}

// MixtureStats is one mixture's decayed MRR@LearnK and HitRate@LearnK
// under each rule (exclude_session first), 0 before any evaluation.
type MixtureStats struct {
	Name    string     `json:"name"`
	MRR     [2]float64 `json:"mrr"`
	HitRate [2]float64 `json:"hit_rate"`
}

// Stats returns the learner's current state.
func (l *BlendLearner) Stats() LearnedStats {
	st := LearnedStats{Every: int(l.every), Seen: l.seen, Evaluated: l.evals}
	for r := range nRules {
		w, popW := l.weights(r == ruleExclude)
		ws := map[string]float64{"pop": popW}
		for si, s := range l.b.signals {
			ws[s.Name] = w[si]
		}
		st.Rules = append(st.Rules, LearnedRule{Rule: ruleNames[r], Chosen: l.mixes[l.chosen[r]].name, Weights: ws})
	}
	for mi, m := range l.mixes {
		ms := MixtureStats{Name: m.name}
		for r := range nRules {
			if l.norm[r] > 0 {
				ms.MRR[r] = l.rr[r][mi] / l.norm[r]
				ms.HitRate[r] = l.hit[r][mi] / l.norm[r]
			}
		}
		st.Pool = append(st.Pool, ms)
	}
	return st
}

// learnStateKey is the one key under the learner's prefix.
const learnStateKey = "s"

func (l *BlendLearner) SetPrefix(prefix string) { l.prefix = prefix }
func (l *BlendLearner) Prefix() string          { return l.prefix }

// Flush writes the state when it changed: u64 eligible clicks, u64
// evaluations, u32 number of mixtures n, per rule f64 norm, then n ×
// (u16 name length, name, per rule f64 rr and f64 hit sums). Mixtures are
// stored by name, so a pool that changes between releases keeps the
// scores of the mixtures it still has.
func (l *BlendLearner) Flush(kv KV) error {
	if !l.dirty {
		return nil
	}
	buf := binary.BigEndian.AppendUint64(nil, l.seen)
	buf = binary.BigEndian.AppendUint64(buf, l.evals)
	buf = binary.BigEndian.AppendUint32(buf, uint32(len(l.mixes)))
	for r := range nRules {
		buf = binary.BigEndian.AppendUint64(buf, math.Float64bits(l.norm[r]))
	}
	for mi, m := range l.mixes {
		buf = binary.BigEndian.AppendUint16(buf, uint16(len(m.name)))
		buf = append(buf, m.name...)
		for r := range nRules {
			buf = binary.BigEndian.AppendUint64(buf, math.Float64bits(l.rr[r][mi]))
			buf = binary.BigEndian.AppendUint64(buf, math.Float64bits(l.hit[r][mi]))
		}
	}
	if err := kv.Set([]byte(l.prefix+learnStateKey), buf); err != nil {
		return err
	}
	l.dirty = false
	return nil
}

// Load restores the state Flush wrote and chooses again from it, which
// gives the choice made before the restart.
func (l *BlendLearner) Load(key, val []byte) error {
	if string(key[len(l.prefix):]) != learnStateKey {
		return fmt.Errorf("%w: learned blend: unknown key %q", ErrCorrupt, key)
	}
	bad := func(what string) error {
		return fmt.Errorf("%w: learned blend state: %s", ErrCorrupt, what)
	}
	if len(val) < 20+8*nRules {
		return bad("short header")
	}
	l.seen = binary.BigEndian.Uint64(val)
	l.evals = binary.BigEndian.Uint64(val[8:])
	n := int(binary.BigEndian.Uint32(val[16:]))
	val = val[20:]
	for r := range nRules {
		l.norm[r] = math.Float64frombits(binary.BigEndian.Uint64(val))
		val = val[8:]
	}
	for range n {
		if len(val) < 2 {
			return bad("short mixture")
		}
		nl := int(binary.BigEndian.Uint16(val))
		if len(val) < 2+nl+16*nRules {
			return bad("short mixture")
		}
		name := string(val[2 : 2+nl])
		val = val[2+nl:]
		mi := slices.IndexFunc(l.mixes, func(m mixture) bool { return m.name == name })
		for r := range nRules {
			if mi >= 0 {
				l.rr[r][mi] = math.Float64frombits(binary.BigEndian.Uint64(val))
				l.hit[r][mi] = math.Float64frombits(binary.BigEndian.Uint64(val[8:]))
			}
			val = val[16:]
		}
	}
	if len(val) != 0 {
		return bad("trailing bytes")
	}
	for r := range nRules {
		l.choose(r)
	}
	return nil
}

// DirtyBytes estimates the next flush's size.
func (l *BlendLearner) DirtyBytes() int {
	if !l.dirty {
		return 0
	}
	return 64 + len(l.mixes)*(32+16*nRules)
}

// weightsFor returns the weights a query answers with: nil (each signal's
// own) and the blend's popularity weight for a fixed blend, the chosen
// mixture's for a learned one. skip non-nil means the caller leaves items
// out, which a learned blend scores as the exclusion rule.
func (b *Blend) weightsFor(skip func(ItemID) bool) ([]float64, float64) {
	if b.learn == nil {
		return nil, b.popW
	}
	return b.learn.weights(skip != nil)
}

// Learner returns the blend's learner, nil for a blend with fixed weights.
func (b *Blend) Learner() *BlendLearner { return b.learn }
