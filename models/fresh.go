package models

import (
	"encoding/binary"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strconv"
	"strings"
	"time"
)

// FreshOptions configure fresh-item exploration.
type FreshOptions struct {
	// Window: an item is fresh while younger than this, in event time
	// (default 48 h), and only then: fresh means new. Its age counts from
	// its record's publication time, or else from the first record or
	// click seen. How often it was shown does not matter: an old item
	// nobody reported as shown is not fresh.
	Window time.Duration
	// MaxPool bounds the items competing, newest kept (default 500).
	MaxPool int
	// PriorA and PriorB are the Beta prior of every item's click rate
	// (default 1 and 1: uniform, common practice).
	PriorA, PriorB float64
	// ContentBoost prefers fresh items that resemble the session: an item
	// of content affinity a in [0, 1] scores θ·(1 + ContentBoost·a)
	// (default 4).
	ContentBoost float64
	// ServedSessions bounds how many sessions' served fresh items are
	// remembered to credit a later click (default 100,000).
	ServedSessions int
}

// DefaultFreshOptions returns the defaults documented on [FreshOptions].
func DefaultFreshOptions() FreshOptions {
	return FreshOptions{Window: 48 * time.Hour, MaxPool: 500, PriorA: 1, PriorB: 1, ContentBoost: 4, ServedSessions: 100_000}
}

func (o *FreshOptions) validate() error {
	d := DefaultFreshOptions()
	if o.Window == 0 {
		o.Window = d.Window
	}
	if o.MaxPool == 0 {
		o.MaxPool = d.MaxPool
	}
	if o.PriorA == 0 {
		o.PriorA = d.PriorA
	}
	if o.PriorB == 0 {
		o.PriorB = d.PriorB
	}
	if o.ServedSessions == 0 {
		o.ServedSessions = d.ServedSessions
	}
	switch {
	case o.Window < time.Minute:
		return fmt.Errorf("%w: fresh: Window %s below 1m", ErrBadSpec, o.Window)
	case o.MaxPool < 1:
		return fmt.Errorf("%w: fresh: MaxPool %d below 1", ErrBadSpec, o.MaxPool)
	case !(o.PriorA > 0) || !(o.PriorB > 0):
		return fmt.Errorf("%w: fresh: PriorA and PriorB must be > 0", ErrBadSpec)
	case !(o.ContentBoost >= 0):
		return fmt.Errorf("%w: fresh: ContentBoost %g below 0", ErrBadSpec, o.ContentBoost)
	case o.ServedSessions < 1:
		return fmt.Errorf("%w: fresh: ServedSessions %d below 1", ErrBadSpec, o.ServedSessions)
	}
	return nil
}

// Fresh explores items too new to have collaborative statistics by
// Beta-Bernoulli Thompson sampling: each fresh item's click rate has a
// Beta(PriorA + clicks, PriorB + impressions - clicks) posterior, a query
// draws one rate θ per item and the highest draws win the exploration
// slots. Items that are shown and not clicked lose their draws' mass; items
// never shown keep the prior's spread and get their turn.
//
// Impressions and clicks come from what callers report they displayed, not
// from what the service answered (a ranker downstream may drop an item):
// [Fresh.Served] for each report (serve's POST /v1/shown, through the
// log), [Fresh.RecordSuccess] for a click on a shown item, or, for tracked
// sessions, automatically when the session clicks an item it was shown.
// Like Observe, these must be called from the goroutine that applies
// events. [Fresh.Pick] and [Fresh.Explore] take their generator from the
// caller, so a replay with the same seed and request ids reproduces every
// choice.
//
// As a Model (inside a blend), Fresh is deterministic: it scores fresh
// items by their posterior mean times the content preference.
type Fresh struct {
	opts    FreshOptions
	cat     *Catalog
	content *Content // nil: no content preference

	born   []int64 // 0: never seen
	imps   []uint32
	succ   []uint32
	inPool []bool
	// ub is each item's upper confidence bound (see Pick), kept current
	// as impressions and clicks change so a request reads it.
	ub    []float64
	flag  []bool
	dirty []ItemID
	pool  []ItemID // ascending id
	byUB  []ItemID // the pool by upper bound, best first, ties by lower id

	served     map[uint64][]ItemID // session → served items not yet clicked
	servedFIFO []uint64
	prefix     string
}

// NewFresh returns an empty exploration model; content (may be nil)
// supplies the session affinity.
func NewFresh(opts FreshOptions, cat *Catalog, content *Content) (*Fresh, error) {
	if err := opts.validate(); err != nil {
		return nil, err
	}
	return &Fresh{opts: opts, cat: cat, content: content, served: map[uint64][]ItemID{}}, nil
}

func (f *Fresh) Name() string {
	d := DefaultFreshOptions()
	var ps []string
	if f.opts.ContentBoost != d.ContentBoost {
		ps = append(ps, "boost="+ftoa(f.opts.ContentBoost))
	}
	if f.content == nil {
		ps = append(ps, "content=0")
	}
	if f.opts.MaxPool != d.MaxPool {
		ps = append(ps, "pool="+strconv.Itoa(f.opts.MaxPool))
	}
	if f.opts.PriorA != d.PriorA {
		ps = append(ps, "prior_a="+ftoa(f.opts.PriorA))
	}
	if f.opts.PriorB != d.PriorB {
		ps = append(ps, "prior_b="+ftoa(f.opts.PriorB))
	}
	if f.opts.Window != d.Window {
		ps = append(ps, "window="+ftoa(f.opts.Window.Hours()))
	}
	if len(ps) == 0 {
		return "fresh"
	}
	return "fresh(" + strings.Join(ps, ",") + ")"
}

// Options returns the effective options.
func (f *Fresh) Options() FreshOptions { return f.opts }

func (f *Fresh) grow(id ItemID) {
	if int(id) < len(f.born) {
		return
	}
	n := int(id) + 1
	f.born = append(f.born, make([]int64, n-len(f.born))...)
	f.imps = append(f.imps, make([]uint32, n-len(f.imps))...)
	f.succ = append(f.succ, make([]uint32, n-len(f.succ))...)
	f.inPool = append(f.inPool, make([]bool, n-len(f.inPool))...)
	for len(f.ub) < n {
		f.ub = append(f.ub, f.upperBound(0, 0))
	}
	f.flag = append(f.flag, make([]bool, n-len(f.flag))...)
}

func (f *Fresh) markDirty(id ItemID) {
	f.setUB(id, f.upperBound(f.imps[id], f.succ[id]))
	if !f.flag[id] {
		f.flag[id] = true
		f.dirty = append(f.dirty, id)
	}
}

// Observe notes an item's first click as its birth when no record said
// otherwise, and credits a click on an item served to the same session.
func (f *Fresh) Observe(o *Observation) {
	f.grow(o.Item)
	if f.born[o.Item] == 0 {
		f.setBorn(o.Item, o.TS, o.TS)
	}
	if items, ok := f.served[o.SessionNo]; ok && o.SessionNo != 0 {
		if i := slices.Index(items, o.Item); i >= 0 {
			f.RecordSuccess(o.Item, o.TS)
			f.served[o.SessionNo] = slices.Delete(items, i, i+1) // one credit per serving
		}
	}
}

// ObserveItem takes the item's birth from its publication time, else from
// the first time it is seen.
func (f *Fresh) ObserveItem(info *ItemInfo) {
	f.grow(info.Item)
	born := info.Published
	if born <= 0 {
		if f.born[info.Item] != 0 {
			return
		}
		born = info.TS
	}
	if born != f.born[info.Item] {
		f.setBorn(info.Item, born, info.TS)
	}
}

func (f *Fresh) setBorn(id ItemID, born, now int64) {
	if born == 0 {
		born = 1 // 0 means "never seen"
	}
	f.born[id] = born
	f.markDirty(id)
	if !f.inPool[id] && f.eligibleAt(id, now) {
		f.inPool[id] = true
		i, _ := slices.BinarySearch(f.pool, id)
		f.pool = slices.Insert(f.pool, i, id)
		f.byUB = slices.Insert(f.byUB, f.ubSearch(id, f.ub[id]), id)
		if len(f.pool) > 2*f.opts.MaxPool {
			f.compact(now)
		}
	}
}

// eligibleAt reports whether id is fresh at now, availability aside:
// first seen less than Window before now, in event time.
func (f *Fresh) eligibleAt(id ItemID, now int64) bool {
	if int(id) >= len(f.born) || f.born[id] == 0 {
		return false
	}
	return now-f.born[id] < f.opts.Window.Milliseconds()
}

// compact drops items that can never be fresh again, then the oldest
// beyond MaxPool. It runs at a pool size that depends only on the events
// seen, so the pool is a function of the stream.
func (f *Fresh) compact(now int64) {
	keep := f.pool[:0]
	for _, id := range f.pool {
		if f.eligibleAt(id, now) {
			keep = append(keep, id)
		} else {
			f.inPool[id] = false
			f.markDirty(id)
		}
	}
	f.pool = keep
	defer f.sortByUB()
	if len(f.pool) <= f.opts.MaxPool {
		return
	}
	byAge := slices.Clone(f.pool)
	slices.SortFunc(byAge, func(a, b ItemID) int {
		switch {
		case f.born[a] > f.born[b]:
			return -1
		case f.born[a] < f.born[b]:
			return 1
		}
		return int(b) - int(a)
	})
	for _, id := range byAge[f.opts.MaxPool:] {
		f.inPool[id] = false
		f.markDirty(id)
	}
	keep = f.pool[:0]
	for _, id := range f.pool {
		if f.inPool[id] {
			keep = append(keep, id)
		}
	}
	f.pool = keep
}

// IsFresh reports whether id competes for exploration at now: in the pool,
// fresh and available.
func (f *Fresh) IsFresh(id ItemID, now int64) bool {
	return int(id) < len(f.inPool) && f.inPool[id] && f.eligibleAt(id, now) && (f.cat == nil || f.cat.Available(id))
}

// Stats returns id's recorded impressions and clicks.
func (f *Fresh) Stats(id ItemID) (impressions, clicks int) {
	if int(id) >= len(f.imps) {
		return 0, 0
	}
	return int(f.imps[id]), int(f.succ[id])
}

// RecordImpressions counts one impression of each item.
func (f *Fresh) RecordImpressions(items []ItemID, ts int64) {
	for _, id := range items {
		f.grow(id)
		if f.imps[id] < ^uint32(0) {
			f.imps[id]++
			f.markDirty(id)
		}
	}
}

// RecordSuccess counts a click on a served item. A click with no recorded
// impression left to credit is ignored, so clicks never exceed impressions.
func (f *Fresh) RecordSuccess(id ItemID, ts int64) {
	if int(id) >= len(f.imps) || f.succ[id] >= f.imps[id] {
		return
	}
	f.succ[id]++
	f.markDirty(id)
}

// Served records what a caller displayed to tracked session sessionNo (0:
// none named) at event time ts: one impression of each item that competes
// for exploration (in the pool and fresh at ts), and those items to credit
// if the session clicks one later. Other items are left alone: they never
// compete, so their impressions would cost writes and change nothing. The
// most recent ServedSessions sessions are remembered; the memory is not
// persisted, so a click after a restart is not credited.
func (f *Fresh) Served(sessionNo uint64, shown []ItemID, ts int64) {
	var items []ItemID
	for _, id := range shown {
		if int(id) < len(f.inPool) && f.inPool[id] && f.eligibleAt(id, ts) && !slices.Contains(items, id) {
			items = append(items, id)
		}
	}
	f.RecordImpressions(items, ts)
	if sessionNo == 0 || len(items) == 0 {
		return
	}
	if _, ok := f.served[sessionNo]; !ok {
		f.servedFIFO = append(f.servedFIFO, sessionNo)
		if len(f.servedFIFO) > f.opts.ServedSessions {
			delete(f.served, f.servedFIFO[0])
			f.servedFIFO = f.servedFIFO[1:]
		}
	}
	for _, id := range items {
		if !slices.Contains(f.served[sessionNo], id) {
			f.served[sessionNo] = append(f.served[sessionNo], id)
		}
	}
}

// eligible appends the pool items fresh at q.Now, available, not the
// session's last item and not skipped, in ascending id order.
func (f *Fresh) eligible(q *Query, skip func(ItemID) bool, dst []ItemID) []ItemID {
	out := f.ruledOut(q, skip)
	for _, id := range f.pool {
		if !out(id) {
			dst = append(dst, id)
		}
	}
	return dst
}

// ruledOut reports whether a pool item cannot compete for q: the session's
// last item, no longer fresh, or skipped by the caller.
func (f *Fresh) ruledOut(q *Query, skip func(ItemID) bool) func(ItemID) bool {
	last, hasLast := q.Last()
	return func(id ItemID) bool {
		return (hasLast && id == last) || !f.IsFresh(id, q.Now) || (skip != nil && skip(id))
	}
}

func (f *Fresh) affinity(q *Query, items []ItemID) []float64 {
	aff := make([]float64, len(items))
	if f.content != nil && f.opts.ContentBoost > 0 && len(q.Session) > 0 {
		f.content.Affinity(q, items, aff)
	}
	return aff
}

// Pick chooses up to n fresh items for q by Thompson sampling, best draw
// first, skipping items for which skip is true (skip may be nil). The
// returned scores are the draws times the content preference. rng must not
// be shared with a concurrent caller; see [NewExploreRand].
//
// With more than shortlistSize(n) eligible items, only the shortlist with
// the highest upper confidence bounds (posterior mean plus three standard
// deviations) draws: an item whose bound lies below that many others'
// almost never has the best draw, and drawing for a whole pool of hundreds
// on every request cost a fifth of serve's CPU under load. With fewer
// eligible items it is exact Thompson sampling.
func (f *Fresh) Pick(q *Query, n int, rng *rand.Rand, skip func(ItemID) bool, dst []Scored) []Scored {
	if n <= 0 {
		return dst
	}
	items := f.shortlist(q, shortlistSize(n), skip)
	aff := f.affinity(q, items)
	draws := make([]Scored, len(items))
	for i, id := range items { // ascending id: the draws are reproducible
		a, b := f.posterior(f.imps[id], f.succ[id])
		// TopK drops scores <= 0; a draw that underflows to 0 still competes.
		draws[i] = Scored{id, max(sampleBeta(rng, a, b)*(1+f.opts.ContentBoost*aff[i]), math.SmallestNonzeroFloat64)}
	}
	return topOf(dst, draws, n, nil)
}

// shortlistSize is how many fresh items draw when n are wanted.
func shortlistSize(n int) int { return max(64, 16*n) }

// shortlist returns the eligible items (see eligible) with the m highest
// upper confidence bounds, in ascending id order; all of them when there
// are no more than m. The pool is kept ordered by bound (byUB), so this
// reads the first m eligible items. The content preference is left out of
// the bound: computing it for the whole pool is the cost the shortlist
// avoids.
func (f *Fresh) shortlist(q *Query, m int, skip func(ItemID) bool) []ItemID {
	ruledOut := f.ruledOut(q, skip)
	out := make([]ItemID, 0, m)
	for _, id := range f.byUB {
		if len(out) == m {
			break
		}
		if !ruledOut(id) {
			out = append(out, id)
		}
	}
	slices.Sort(out)
	return out
}

// setUB changes id's upper bound, keeping byUB in order.
func (f *Fresh) setUB(id ItemID, ub float64) {
	if ub == f.ub[id] {
		return
	}
	if f.inPool[id] {
		i := f.ubSearch(id, f.ub[id])
		f.byUB = slices.Delete(f.byUB, i, i+1)
		f.ub[id] = ub
		f.byUB = slices.Insert(f.byUB, f.ubSearch(id, ub), id)
		return
	}
	f.ub[id] = ub
}

// ubSearch returns where id with bound ub lies, or would lie, in byUB.
func (f *Fresh) ubSearch(id ItemID, ub float64) int {
	i, _ := slices.BinarySearchFunc(f.byUB, id, func(e, _ ItemID) int { return cmpScore(f.ub[e], ub, e, id) })
	return i
}

// sortByUB rebuilds byUB from the pool.
func (f *Fresh) sortByUB() {
	f.byUB = append(f.byUB[:0], f.pool...)
	slices.SortFunc(f.byUB, func(a, b ItemID) int { return cmpScore(f.ub[a], f.ub[b], a, b) })
}

// posterior returns the Beta posterior's parameters after imps
// impressions and succ clicks.
func (f *Fresh) posterior(imps, succ uint32) (a, b float64) {
	return f.opts.PriorA + float64(succ), f.opts.PriorB + float64(imps-succ)
}

// upperBound is the posterior mean plus three standard deviations of an
// item's Beta posterior after imps impressions and succ clicks.
func (f *Fresh) upperBound(imps, succ uint32) float64 {
	a, b := f.posterior(imps, succ)
	return a/(a+b) + 3*math.Sqrt(a*b/((a+b)*(a+b)*(a+b+1)))
}

// Candidates adds every fresh item with its posterior mean click rate times
// the content preference.
func (f *Fresh) Candidates(q *Query, out *Scores) {
	items := f.eligible(q, nil, nil)
	aff := f.affinity(q, items)
	for i, id := range items {
		out.Add(id, f.mean(id)*(1+f.opts.ContentBoost*aff[i]))
	}
}

// ScoreItems writes the same score for each fresh item, 0 for others.
func (f *Fresh) ScoreItems(q *Query, items []ItemID, out []float64) {
	clear(out)
	aff := f.affinity(q, items)
	last, hasLast := q.Last()
	for i, id := range items {
		if f.IsFresh(id, q.Now) && !(hasLast && id == last) {
			out[i] = f.mean(id) * (1 + f.opts.ContentBoost*aff[i])
		}
	}
}

func (f *Fresh) mean(id ItemID) float64 {
	a := f.opts.PriorA + float64(f.succ[id])
	return a / (f.opts.PriorA + f.opts.PriorB + float64(f.imps[id]))
}

func (f *Fresh) SetPrefix(prefix string) { f.prefix = prefix }
func (f *Fresh) Prefix() string          { return f.prefix }

// Flush writes each changed item as prefix+bigEndian(item) → birth (8
// bytes), impressions and clicks (4 bytes each), pool membership (1 byte).
func (f *Fresh) Flush(kv KV) error {
	for _, id := range f.dirty {
		f.flag[id] = false
		b := binary.BigEndian.AppendUint64(make([]byte, 0, 17), uint64(f.born[id]))
		b = binary.BigEndian.AppendUint32(b, f.imps[id])
		b = binary.BigEndian.AppendUint32(b, f.succ[id])
		b = append(b, byte(b2i(f.inPool[id])))
		if err := kv.Set(itemKey(f.prefix, id), b); err != nil {
			return fmt.Errorf("flush fresh item %d: %w", id, err)
		}
	}
	f.dirty = f.dirty[:0]
	return nil
}

// Load restores one entry written by Flush; items arrive in id order, so
// the pool rebuilds by appends.
func (f *Fresh) Load(key, val []byte) error {
	k := key[len(f.prefix):]
	if len(k) != 4 || len(val) != 17 || val[16] > 1 {
		return fmt.Errorf("%w: fresh key %x, %d value bytes", ErrCorrupt, key, len(val))
	}
	id := binary.BigEndian.Uint32(k)
	f.grow(id)
	f.born[id] = int64(binary.BigEndian.Uint64(val))
	f.imps[id] = binary.BigEndian.Uint32(val[8:])
	f.succ[id] = binary.BigEndian.Uint32(val[12:])
	f.setUB(id, f.upperBound(f.imps[id], f.succ[id]))
	if val[16] == 1 && !f.inPool[id] {
		f.inPool[id] = true
		i, _ := slices.BinarySearch(f.pool, id)
		f.pool = slices.Insert(f.pool, i, id)
		f.byUB = slices.Insert(f.byUB, f.ubSearch(id, f.ub[id]), id)
	}
	return nil
}
