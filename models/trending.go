package models

import (
	"encoding/binary"
	"fmt"
	"math"
	"slices"
	"sort"
	"strconv"
	"strings"
	"time"
)

// TrendingOptions configure context popularity and trending.
type TrendingOptions struct {
	// Short is the half-life of the recent rate (default 6 h).
	Short time.Duration
	// Long is the half-life of the baseline rate and of context
	// popularity (default 7 days).
	Long time.Duration
	// TopN is how many items each context keeps ranked, by recent count
	// and by baseline count (default 200).
	TopN int
	// MaxContexts caps the contexts, global included; clicks in contexts
	// beyond it count only globally (default 10,000).
	MaxContexts int
}

// DefaultTrendingOptions returns the defaults documented on
// [TrendingOptions].
func DefaultTrendingOptions() TrendingOptions {
	return TrendingOptions{Short: 6 * time.Hour, Long: 7 * 24 * time.Hour, TopN: 200, MaxContexts: 10_000}
}

func (o *TrendingOptions) validate() error {
	d := DefaultTrendingOptions()
	if o.Short == 0 {
		o.Short = d.Short
	}
	if o.Long == 0 {
		o.Long = d.Long
	}
	if o.TopN == 0 {
		o.TopN = d.TopN
	}
	if o.MaxContexts == 0 {
		o.MaxContexts = d.MaxContexts
	}
	switch {
	case o.Short < time.Minute:
		return fmt.Errorf("%w: trending: Short %s below 1m", ErrBadSpec, o.Short)
	case o.Long <= o.Short:
		return fmt.Errorf("%w: trending: Long %s not above Short %s", ErrBadSpec, o.Long, o.Short)
	case o.TopN < 1:
		return fmt.Errorf("%w: trending: TopN %d below 1", ErrBadSpec, o.TopN)
	case o.MaxContexts < 1:
		return fmt.Errorf("%w: trending: MaxContexts %d below 1", ErrBadSpec, o.MaxContexts)
	}
	return nil
}

// Trending keeps decayed click counts per context and globally, under two
// half-lives: a short one for the recent rate and a long one for the
// baseline. A context is any string key: each item's category paths give
// "category=<prefix>" contexts by themselves (from catalogue records), and
// the service may add others, such as "locale=fr", through
// [Trending.ObserveContext].
//
// A decayed count c under half-life H estimates a click rate of
// c·ln2/H (a steady rate r gives c → r·H/ln2). An item trends by how far
// its recent rate exceeds its baseline: trend = rate_short - rate_long,
// in clicks per hour. Ranking by the excess rather than the ratio keeps an
// item with two clicks from outranking one that doubled from a thousand.
//
// Counts are kept in landmark form, each half-life with its own reference
// time moved forward by the model itself, so the short half-life cannot
// overflow between the pipeline's rebases.
type Trending struct {
	opts  TrendingOptions
	cat   *Catalog
	hs    float64 // half-lives, ms
	hl    float64
	refS  int64
	refL  int64
	ctxs  []*trendCtx // ctxs[0] is global
	byKey map[string]uint32
	// itemCtx holds each item's category contexts, from its record.
	itemCtx [][]uint32

	dirtyC    map[uint64]struct{} // ctx<<32 | item
	dirtyI    []ItemID
	flagI     []bool
	newCtx    []uint32
	metaDirty bool
	prefix    string
}

type trendCtx struct {
	key    string
	counts map[ItemID][2]float64 // landmark short, long
	topS   *topList
	topL   *topList
}

// NewTrending returns an empty model filtering through cat (nil:
// everything is available).
func NewTrending(opts TrendingOptions, cat *Catalog) (*Trending, error) {
	if err := opts.validate(); err != nil {
		return nil, err
	}
	t := &Trending{
		opts: opts, cat: cat,
		hs: float64(opts.Short.Milliseconds()), hl: float64(opts.Long.Milliseconds()),
		byKey: map[string]uint32{}, dirtyC: map[uint64]struct{}{},
	}
	t.context("", true)
	return t, nil
}

func (t *Trending) Name() string {
	d := DefaultTrendingOptions()
	var ps []string
	if t.opts.Long != d.Long {
		ps = append(ps, "long="+ftoa(t.opts.Long.Hours()))
	}
	if t.opts.MaxContexts != d.MaxContexts {
		ps = append(ps, "contexts="+strconv.Itoa(t.opts.MaxContexts))
	}
	if t.opts.Short != d.Short {
		ps = append(ps, "short="+ftoa(t.opts.Short.Hours()))
	}
	if t.opts.TopN != d.TopN {
		ps = append(ps, "top="+strconv.Itoa(t.opts.TopN))
	}
	if len(ps) == 0 {
		return "trending"
	}
	return "trending(" + strings.Join(ps, ",") + ")"
}

// context returns the id of key's context, creating it when create is set
// and the cap allows; ok is false otherwise.
func (t *Trending) context(key string, create bool) (uint32, bool) {
	if id, ok := t.byKey[key]; ok {
		return id, true
	}
	if !create || len(t.ctxs) >= t.opts.MaxContexts {
		return 0, false
	}
	id := uint32(len(t.ctxs))
	t.addContext(id, key)
	t.newCtx = append(t.newCtx, id)
	return id, true
}

func (t *Trending) addContext(id uint32, key string) {
	for uint32(len(t.ctxs)) <= id {
		t.ctxs = append(t.ctxs, nil)
	}
	c := &trendCtx{key: key, counts: map[ItemID][2]float64{}}
	c.topS = newTopList(t.opts.TopN, func(i ItemID) float64 { return c.counts[i][0] })
	c.topL = newTopList(t.opts.TopN, func(i ItemID) float64 { return c.counts[i][1] })
	t.ctxs[id] = c
	t.byKey[key] = id
}

// Contexts returns the number of contexts, global included.
func (t *Trending) Contexts() int { return len(t.ctxs) }

// ObserveItem keeps the item's category contexts: "category=camping" and
// "category=camping/tents" for the path camping/tents.
func (t *Trending) ObserveItem(info *ItemInfo) {
	var ids []uint32
	for _, p := range categoryPaths(info.Attrs) {
		for i := 0; i <= len(p); i++ {
			if i == len(p) || p[i] == '/' {
				if id, ok := t.context("category="+p[:i], true); ok && !slices.Contains(ids, id) {
					ids = append(ids, id)
				}
			}
		}
	}
	slices.Sort(ids)
	if int(info.Item) >= len(t.itemCtx) {
		n := int(info.Item) + 1
		t.itemCtx = append(t.itemCtx, make([][]uint32, n-len(t.itemCtx))...)
		t.flagI = append(t.flagI, make([]bool, n-len(t.flagI))...)
	}
	if slices.Equal(t.itemCtx[info.Item], ids) {
		return
	}
	t.itemCtx[info.Item] = ids
	if !t.flagI[info.Item] {
		t.flagI[info.Item] = true
		t.dirtyI = append(t.dirtyI, info.Item)
	}
}

// Observe counts the click globally and in the item's category contexts.
func (t *Trending) Observe(o *Observation) {
	ws, wl := t.weights(o.TS)
	t.add(0, o.Item, ws, wl)
	if int(o.Item) < len(t.itemCtx) {
		for _, c := range t.itemCtx[o.Item] {
			t.add(c, o.Item, ws, wl)
		}
	}
}

// ObserveContext counts a click on item in the context key (for example
// "locale=fr"), creating the context while under MaxContexts. The service
// calls it beside Observe for contexts that events carry; like Observe, it
// must come from the goroutine that applies events.
func (t *Trending) ObserveContext(key string, item ItemID, ts int64) {
	if key == "" {
		return
	}
	id, ok := t.context(key, true)
	if !ok {
		return
	}
	ws, wl := t.weights(ts)
	t.add(id, item, ws, wl)
}

// weights returns the landmark weights of a click at ts, first moving the
// references forward when ts is far past them.
func (t *Trending) weights(ts int64) (float64, float64) {
	if t.refS == 0 {
		t.refS, t.refL, t.metaDirty = ts, ts, true
	}
	if float64(ts-t.refS)/t.hs > maxExponent {
		t.rebase(ts, true)
	}
	if float64(ts-t.refL)/t.hl > maxExponent {
		t.rebase(ts, false)
	}
	return math.Exp2(float64(ts-t.refS) / t.hs), math.Exp2(float64(ts-t.refL) / t.hl)
}

func (t *Trending) rebase(ts int64, short bool) {
	slot, ref, h := 1, &t.refL, t.hl
	if short {
		slot, ref, h = 0, &t.refS, t.hs
	}
	f := math.Exp2(-float64(ts-*ref) / h)
	for id, c := range t.ctxs {
		for item, v := range c.counts {
			v[slot] *= f
			c.counts[item] = v
			t.dirtyC[uint64(id)<<32|uint64(item)] = struct{}{}
		}
	}
	*ref = ts
	t.metaDirty = true
}

func (t *Trending) add(ctx uint32, item ItemID, ws, wl float64) {
	c := t.ctxs[ctx]
	v := c.counts[item]
	v[0] += ws
	v[1] += wl
	c.counts[item] = v
	c.topS.touch(item)
	c.topL.touch(item)
	t.dirtyC[uint64(ctx)<<32|uint64(item)] = struct{}{}
}

// rates returns item's short and long rates in clicks per hour at now.
func (t *Trending) rates(c *trendCtx, item ItemID, now int64) (float64, float64) {
	v := c.counts[item]
	s := v[0] * math.Exp2(-float64(now-t.refS)/t.hs) * math.Ln2 / (t.hs / 3.6e6)
	l := v[1] * math.Exp2(-float64(now-t.refL)/t.hl) * math.Ln2 / (t.hl / 3.6e6)
	return s, l
}

// trendScores adds context c's trend scores at now into out, normalised by
// the context's best, times scale. With no item above its baseline it ranks
// by the recent rate instead.
func (t *Trending) trendScores(c *trendCtx, now int64, skip func(ItemID) bool, scale float64, out *Scores) {
	type row struct {
		id       ItemID
		trend, s float64
	}
	var rows []row
	best, bestS := 0.0, 0.0
	for _, id := range c.topS.items {
		if !t.ok(id, skip) {
			continue
		}
		s, l := t.rates(c, id, now)
		rows = append(rows, row{id, s - l, s})
		best, bestS = max(best, s-l), max(bestS, s)
	}
	for _, r := range rows {
		switch {
		case best > 0 && r.trend > 0:
			out.Add(r.id, scale*r.trend/best)
		case best <= 0 && bestS > 0:
			out.Add(r.id, scale*r.s/bestS)
		}
	}
}

// popScores adds context c's baseline popularity, normalised by its best,
// times scale.
func (t *Trending) popScores(c *trendCtx, skip func(ItemID) bool, scale float64, out *Scores) {
	best := 0.0
	for _, id := range c.topL.items {
		if t.ok(id, skip) {
			best = c.counts[id][1]
			break
		}
	}
	if best <= 0 {
		return
	}
	for _, id := range c.topL.items {
		if t.ok(id, skip) {
			out.Add(id, scale*c.counts[id][1]/best)
		}
	}
}

func (t *Trending) ok(id ItemID, skip func(ItemID) bool) bool {
	return (t.cat == nil || t.cat.Available(id)) && (skip == nil || !skip(id))
}

// fallbackScale puts global answers below every context answer.
const fallbackScale = 1e-6

// fallbackScaleFor scales the global fill: below the contexts' answers when
// there are any, as is when the global answer is the whole answer.
func fallbackScaleFor(out *Scores) float64 {
	if out.Len() == 0 {
		return 1
	}
	return fallbackScale
}

// Popular returns up to n items most popular in the given contexts
// (baseline half-life), best first: an item's score is the sum over the
// contexts of its count divided by that context's best. Unknown contexts
// are ignored, and when the contexts give fewer than n items global
// popularity fills the rest, ranked after them. No keys means global.
func (t *Trending) Popular(keys []string, n int, now int64, skip func(ItemID) bool) []Scored {
	out := new(Scores)
	for _, k := range keys {
		if id, ok := t.byKey[k]; ok && k != "" {
			t.popScores(t.ctxs[id], skip, 1, out)
		}
	}
	if out.Len() < n {
		scale := fallbackScaleFor(out)
		t.fill(out, func(s *Scores) { t.popScores(t.ctxs[0], skip, scale, s) })
	}
	return TopK(nil, out, n, nil)
}

// TopIn returns up to n items most popular in the one context key, with no
// global fallback (nil for an unknown context).
func (t *Trending) TopIn(key string, n int, skip func(ItemID) bool) []Scored {
	id, ok := t.byKey[key]
	if !ok {
		return nil
	}
	out := new(Scores)
	t.popScores(t.ctxs[id], skip, 1, out)
	return TopK(nil, out, n, nil)
}

// Trend returns up to n items trending in the given contexts, best first,
// scored like Popular but by trend (see the type doc), with global trending
// filling what the contexts leave.
func (t *Trending) Trend(keys []string, n int, now int64, skip func(ItemID) bool) []Scored {
	out := new(Scores)
	for _, k := range keys {
		if id, ok := t.byKey[k]; ok && k != "" {
			t.trendScores(t.ctxs[id], now, skip, 1, out)
		}
	}
	if out.Len() < n {
		scale := fallbackScaleFor(out)
		t.fill(out, func(s *Scores) { t.trendScores(t.ctxs[0], now, skip, scale, s) })
	}
	return TopK(nil, out, n, nil)
}

// fill adds the fallback's items that out does not have yet.
func (t *Trending) fill(out *Scores, fallback func(*Scores)) {
	g := new(Scores)
	fallback(g)
	for _, e := range g.Entries() {
		if _, ok := out.Lookup(e.Item); !ok {
			out.Set(e.Item, e.Score)
		}
	}
}

// Candidates adds the globally trending items: an empty session's answer
// that follows the day rather than the week.
func (t *Trending) Candidates(q *Query, out *Scores) {
	t.trendScores(t.ctxs[0], q.Now, nil, 1, out)
}

// ScoreItems writes each item's global trend score, as Candidates would.
func (t *Trending) ScoreItems(q *Query, items []ItemID, out []float64) {
	clear(out)
	s := new(Scores)
	t.Candidates(q, s)
	for i, id := range items {
		out[i] = s.Get(id)
	}
}

func (t *Trending) SetPrefix(prefix string) { t.prefix = prefix }
func (t *Trending) Prefix() string          { return t.prefix }

// Storage: prefix+"c/"+ctx+item (4+4 bytes) → short and long landmark
// counts (float64 bits); prefix+"i/"+item → the item's context ids;
// prefix+"k/"+ctx → the context's key; prefix+"m" → the two reference
// times. A flush writes what changed.
func (t *Trending) Flush(kv KV) error {
	keys := make([]uint64, 0, len(t.dirtyC))
	for k := range t.dirtyC {
		keys = append(keys, k)
	}
	sort.Slice(keys, func(i, j int) bool { return keys[i] < keys[j] })
	for _, k := range keys {
		ctx, item := uint32(k>>32), ItemID(k)
		v := t.ctxs[ctx].counts[item]
		key := binary.BigEndian.AppendUint64([]byte(t.prefix+"c/"), k)
		val := binary.BigEndian.AppendUint64(make([]byte, 0, 16), math.Float64bits(v[0]))
		val = binary.BigEndian.AppendUint64(val, math.Float64bits(v[1]))
		if err := kv.Set(key, val); err != nil {
			return fmt.Errorf("flush trending count: %w", err)
		}
	}
	clear(t.dirtyC)
	for _, id := range t.dirtyI {
		t.flagI[id] = false
		var val []byte
		for _, c := range t.itemCtx[id] {
			val = binary.BigEndian.AppendUint32(val, c)
		}
		if err := kv.Set(itemKey(t.prefix+"i/", id), append([]byte{}, val...)); err != nil {
			return fmt.Errorf("flush trending item: %w", err)
		}
	}
	t.dirtyI = t.dirtyI[:0]
	for _, id := range t.newCtx {
		key := binary.BigEndian.AppendUint32([]byte(t.prefix+"k/"), id)
		if err := kv.Set(key, []byte(t.ctxs[id].key)); err != nil {
			return fmt.Errorf("flush trending context: %w", err)
		}
	}
	t.newCtx = t.newCtx[:0]
	if t.metaDirty {
		val := binary.BigEndian.AppendUint64(nil, uint64(t.refS))
		val = binary.BigEndian.AppendUint64(val, uint64(t.refL))
		if err := kv.Set([]byte(t.prefix+"m"), val); err != nil {
			return fmt.Errorf("flush trending meta: %w", err)
		}
		t.metaDirty = false
	}
	return nil
}

// Load restores one entry written by Flush. Counts arrive before context
// keys (key order), so a context may be created keyless and named later.
func (t *Trending) Load(key, val []byte) error {
	k := key[len(t.prefix):]
	switch {
	case len(k) == 10 && string(k[:2]) == "c/" && len(val) == 16:
		ctx, item := binary.BigEndian.Uint32(k[2:]), binary.BigEndian.Uint32(k[6:])
		if int(ctx) >= len(t.ctxs) || t.ctxs[ctx] == nil {
			t.addContext(ctx, "\x00pending:"+strconv.Itoa(int(ctx)))
		}
		c := t.ctxs[ctx]
		c.counts[item] = [2]float64{math.Float64frombits(binary.BigEndian.Uint64(val)), math.Float64frombits(binary.BigEndian.Uint64(val[8:]))}
		c.topS.touch(item)
		c.topL.touch(item)
		return nil
	case len(k) == 6 && string(k[:2]) == "i/" && len(val)%4 == 0:
		item := binary.BigEndian.Uint32(k[2:])
		if int(item) >= len(t.itemCtx) {
			n := int(item) + 1
			t.itemCtx = append(t.itemCtx, make([][]uint32, n-len(t.itemCtx))...)
			t.flagI = append(t.flagI, make([]bool, n-len(t.flagI))...)
		}
		var ids []uint32
		for i := 0; i < len(val); i += 4 {
			ids = append(ids, binary.BigEndian.Uint32(val[i:]))
		}
		t.itemCtx[item] = ids
		return nil
	case len(k) == 6 && string(k[:2]) == "k/":
		ctx := binary.BigEndian.Uint32(k[2:])
		s := string(val)
		if int(ctx) < len(t.ctxs) && t.ctxs[ctx] != nil {
			delete(t.byKey, t.ctxs[ctx].key)
			t.ctxs[ctx].key = s
			t.byKey[s] = ctx
			return nil
		}
		t.addContext(ctx, s)
		return nil
	case string(k) == "m" && len(val) == 16:
		t.refS = int64(binary.BigEndian.Uint64(val))
		t.refL = int64(binary.BigEndian.Uint64(val[8:]))
		return nil
	}
	return fmt.Errorf("%w: trending key %q, %d value bytes", ErrCorrupt, key, len(val))
}
