package session

import (
	"crypto/rand"
	"encoding/hex"
	"strconv"
	"time"

	"waymark/models"
)

// NextRequest asks for next items.
type NextRequest struct {
	// Session names a tracked session; when empty, Items is the sequence.
	Session string
	Items   []string
	K       int
	// Keep keeps items already in the session among the answers.
	Keep bool
	// Category restricts answers to items in this category path (or
	// below it); Exclude leaves the given items out.
	Category string
	Exclude  []string
	// Context keys (for example "category=camping" or "locale=fr") pick
	// the popularity an empty session gets, falling back to global.
	Context []string
	// PreferItems and PreferCategories are what a visitor declared at a
	// first visit; they seed the session as pseudo-clicks.
	PreferItems      []string
	PreferCategories []string
	// Budget bounds the query's time; signals that would overrun it are
	// skipped and named in the answer. 0: no limit.
	Budget time.Duration
}

// Recommendation is one answered item.
type Recommendation struct {
	Item     string             `json:"item"`
	Score    float64            `json:"score"`
	Features map[string]float64 `json:"features,omitempty"`
	// Explore marks the answer's exploration slot (at most one, never the
	// first): a fresh item placed by Thompson sampling rather than by its
	// blended score. Fresh marks any item new by event time (first seen
	// within the freshness window); its impressions count when a caller
	// reports it shown (POST /v1/shown).
	Explore bool `json:"explore,omitempty"`
	Fresh   bool `json:"fresh,omitempty"`
}

// NextResult is the answer to a NextRequest.
type NextResult struct {
	Items []Recommendation `json:"items"`
	// Source says which signal answered: "blend", or "pop" when only
	// popularity could (an empty session, or only unknown items).
	Source string `json:"source"`
	// Tracked says a named session was found.
	Tracked bool `json:"tracked"`
	// Known and Unknown count the session's items the models know.
	Known   int `json:"known"`
	Unknown int `json:"unknown"`
	// Request identifies the response, unique across restarts and
	// replicas, so the caller can report what it showed (POST /v1/shown).
	Request string `json:"request"`
	// Skipped names signals left out to stay within the time budget.
	Skipped []string `json:"skipped,omitempty"`
	// TS is the event time the answer was computed at (unix ms).
	TS int64 `json:"-"`
}

// Source names.
const (
	SourceBlend   = "blend"
	SourcePop     = "pop"
	SourceContext = "context" // popularity within the request's contexts
)

// Next answers a next-items request.
func (e *Engine) Next(req NextRequest) NextResult {
	start := time.Now()
	bu := models.Budget{}
	if req.Budget > 0 {
		bu.Deadline = start.Add(req.Budget)
	}
	e.mu.RLock()
	var q models.Query
	var res NextResult
	if req.Session != "" {
		q, res.Tracked = e.p.SessionQuery(req.Session)
	} else {
		q = e.p.NewQuery(req.Items, 0)
	}
	own := q.Session // the session's own clicks, excluded by default
	if len(req.PreferItems) > 0 || len(req.PreferCategories) > 0 {
		pref := models.Preferences{Categories: req.PreferCategories}
		for _, it := range req.PreferItems {
			if id, ok := e.p.Dict.Lookup(it); ok {
				pref.Items = append(pref.Items, id)
			}
		}
		q = e.p.Set.SeedQuery(q, pref, 0)
	}
	skip := e.skipFunc(req, own)
	var r models.Result
	if len(q.Session) == 0 && len(req.Context) > 0 && e.trend != nil {
		r.Items = e.trend.Popular(req.Context, req.K, q.Now, skip)
		r.Features = make([][]float64, len(r.Items))
		res.Source = SourceContext
	} else {
		r = e.blend.Explain(&q, req.K, skip, bu)
		res.Source = SourceBlend
		if r.Fallback {
			res.Source = SourcePop
		}
	}
	names := e.blend.Signals()
	res.Items = make([]Recommendation, len(r.Items))
	for i, it := range r.Items {
		f := make(map[string]float64, len(names))
		for j, n := range names {
			if j < len(r.Features[i]) && r.Features[i][j] != 0 {
				f[n] = r.Features[i][j]
			}
		}
		res.Items[i] = Recommendation{Item: e.p.Dict.Name(it.Item), Score: it.Score, Features: f}
	}
	res.Skipped = r.Skipped
	res.Request = e.reqPrefix + "-" + strconv.FormatUint(e.reqNo.Add(1), 16)
	res.TS = q.Now
	if bu.Deadline.IsZero() || time.Now().Before(bu.Deadline) {
		e.exploreLocked(&q, req.K, skip, r.Items, &res)
	} else {
		res.Skipped = append(res.Skipped, "explore")
	}
	e.mu.RUnlock()
	res.Known, res.Unknown = len(own), q.Unknown
	e.met.observeQuery("next", res.Source, time.Since(start))
	return res
}

// skipFunc returns what a request leaves out: the session's own items
// (unless kept), excluded items, items outside the requested category.
// Call with the read lock held.
func (e *Engine) skipFunc(req NextRequest, own []models.Step) func(models.ItemID) bool {
	var excl map[models.ItemID]bool
	if len(req.Exclude) > 0 {
		excl = make(map[models.ItemID]bool, len(req.Exclude))
		for _, it := range req.Exclude {
			if id, ok := e.p.Dict.Lookup(it); ok {
				excl[id] = true
			}
		}
	}
	keepOwn := req.Keep || len(own) == 0
	cat := e.p.Set.Catalog()
	if keepOwn && excl == nil && req.Category == "" {
		return nil
	}
	return func(id models.ItemID) bool {
		if !keepOwn {
			for _, s := range own {
				if s.Item == id {
					return true
				}
			}
		}
		if excl[id] {
			return true
		}
		return req.Category != "" && !cat.InCategory(id, req.Category)
	}
}

// ScoreRequest asks for features of caller-supplied candidates.
type ScoreRequest struct {
	Items      []string
	Candidates []string
}

// ScoredCandidate is one candidate's blended score and features.
type ScoredCandidate struct {
	Item     string             `json:"item"`
	Score    float64            `json:"score"`
	Features map[string]float64 `json:"features"`
	// Unknown flags a candidate the models have never seen.
	Unknown bool `json:"unknown"`
}

// ScoreResult answers a ScoreRequest, candidates in request order.
type ScoreResult struct {
	Candidates []ScoredCandidate `json:"candidates"`
	Known      int               `json:"known"`
	Unknown    int               `json:"unknown"`
}

// Score computes per-signal features and the blended score of each
// candidate, keeping the caller's order. Unknown candidates score zero and
// are flagged.
func (e *Engine) Score(req ScoreRequest) ScoreResult {
	start := time.Now()
	e.mu.RLock()
	q := e.p.NewQuery(req.Items, 0)
	ids := make([]models.ItemID, 0, len(req.Candidates))
	known := make([]bool, len(req.Candidates))
	for i, c := range req.Candidates {
		if id, ok := e.p.Dict.Lookup(c); ok {
			ids = append(ids, id)
			known[i] = true
		}
	}
	rows := e.blend.Score(&q, ids)
	names := e.blend.Signals()
	e.mu.RUnlock()
	res := ScoreResult{Candidates: make([]ScoredCandidate, len(req.Candidates)), Known: len(q.Session), Unknown: q.Unknown}
	j := 0
	for i, c := range req.Candidates {
		sc := ScoredCandidate{Item: c, Features: make(map[string]float64, len(names))}
		if known[i] {
			row := rows[j]
			j++
			sc.Score = row.Score
			for k, n := range names {
				sc.Features[n] = row.Features[k]
			}
		} else {
			sc.Unknown = true
			for _, n := range names {
				sc.Features[n] = 0
			}
		}
		res.Candidates[i] = sc
	}
	e.met.observeQuery("score", SourceBlend, time.Since(start))
	return res
}

// Neighbor is an item and its similarity.
type Neighbor struct {
	Item  string  `json:"item"`
	Score float64 `json:"score"`
}

// Neighbors returns the k items most co-visited with item (cosine), and
// whether the item is known.
func (e *Engine) Neighbors(item string, k int) ([]Neighbor, bool) {
	e.mu.RLock()
	defer e.mu.RUnlock()
	id, ok := e.p.Dict.Lookup(item)
	if !ok || e.iknn == nil {
		return []Neighbor{}, ok
	}
	ns := e.iknn.Neighbors(id, k, e.p.Checkpoint().Watermark)
	out := make([]Neighbor, len(ns))
	for i, n := range ns {
		out[i] = Neighbor{Item: e.p.Dict.Name(n.Item), Score: n.Score}
	}
	return out, true
}

// PopularItem is an item and its decayed click count at the watermark.
type PopularItem struct {
	Item   string  `json:"item"`
	Clicks float64 `json:"clicks"`
}

// Popular returns the k most popular items.
func (e *Engine) Popular(k int) []PopularItem {
	e.mu.RLock()
	defer e.mu.RUnlock()
	pop := e.p.Set.Pop()
	f := e.p.Decay().Factor(e.p.Checkpoint().Watermark)
	top := pop.Top(k)
	out := make([]PopularItem, len(top))
	for i, id := range top {
		out[i] = PopularItem{Item: e.p.Dict.Name(id), Clicks: pop.Count(id) * f}
	}
	return out
}

// ForgetSession deletes a visitor's session data at once, on this replica
// only (serve goes through the log instead); the next flush deletes it from
// the store. It reports whether the session was tracked.
func (e *Engine) ForgetSession(id string) bool {
	_, tracked := e.p.SessionQuery(id)
	e.mu.Lock()
	e.p.Forget(id)
	e.mu.Unlock()
	return tracked
}

// exploreLocked flags the fresh items of an answer and gives it at most
// one exploration slot, by the share of slots the engine explores (see
// models.Fresh.Explore). The draw is seeded by the seed and the request id
// alone, so an answer is reproducible from them. Nothing is written: what
// was shown counts only when the caller reports it (POST /v1/shown).
func (e *Engine) exploreLocked(q *models.Query, k int, skip func(models.ItemID) bool, ranked []models.Scored, res *NextResult) {
	if e.fresh == nil {
		return
	}
	for i, it := range ranked {
		res.Items[i].Fresh = e.fresh.IsFresh(it.Item, q.Now)
	}
	x, ok := e.fresh.Explore(q, e.opts.ExploreShare, k, ranked, models.ExploreRand(e.opts.ExploreSeed, res.Request), skip)
	if !ok {
		return
	}
	rec := Recommendation{Item: e.p.Dict.Name(x.Item), Explore: true, Fresh: true}
	if x.Slot == len(res.Items) {
		res.Items = append(res.Items, rec)
	} else {
		res.Items[x.Slot] = rec
	}
}

// randomPrefix returns 64 random bits in hex: the request id prefix of
// one process.
func randomPrefix() string {
	var b [8]byte
	_, _ = rand.Read(b[:]) // crypto/rand.Read never fails (Go 1.24+)
	return hex.EncodeToString(b[:])
}
