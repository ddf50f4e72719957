package models

import (
	"encoding/binary"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
	"sync"
)

// ContentOptions configure the content model.
type ContentOptions struct {
	// Span is how many of the session's last distinct items look for
	// content neighbours; the last weighs 1, earlier ones 1/(1+distance)
	// (default 2).
	Span int
	// VectorWeight α mixes the two similarities when both items carry
	// vectors: (1-α)·tfidf + α·vector (default 0.5). When only one kind is
	// present on both items, that one is the similarity.
	VectorWeight float64
	// MaxQueryTokens bounds the tokens of the query item that are looked
	// up in the inverted index, rarest first (default 32). The cosine
	// itself always uses every token.
	MaxQueryTokens int
	// MaxPostings bounds how many items of one token's posting list a
	// lookup reads, newest items first (default 2000), so a token every
	// item has costs no more than a rare one.
	MaxPostings int
	// MaxCandidates bounds the items a lookup scores exactly (default
	// 500); the rarest shared tokens find them first. Vector candidates
	// come on top.
	MaxCandidates int
	// ExactVectors is how many vectors of one dimension are compared
	// exhaustively; above it a random-hyperplane index proposes the
	// candidates (default 5000).
	ExactVectors int
}

// DefaultContentOptions returns the defaults documented on
// [ContentOptions].
func DefaultContentOptions() ContentOptions {
	return ContentOptions{Span: 2, VectorWeight: 0.5, MaxQueryTokens: 32, MaxPostings: 2000, MaxCandidates: 500, ExactVectors: 5000}
}

func (o *ContentOptions) validate() error {
	d := DefaultContentOptions()
	if o.Span == 0 {
		o.Span = d.Span
	}
	if o.MaxQueryTokens == 0 {
		o.MaxQueryTokens = d.MaxQueryTokens
	}
	if o.MaxPostings == 0 {
		o.MaxPostings = d.MaxPostings
	}
	if o.ExactVectors == 0 {
		o.ExactVectors = d.ExactVectors
	}
	if o.MaxCandidates == 0 {
		o.MaxCandidates = d.MaxCandidates
	}
	switch {
	case o.Span < 1:
		return fmt.Errorf("%w: content: Span %d below 1", ErrBadSpec, o.Span)
	case o.VectorWeight < 0 || o.VectorWeight > 1 || o.VectorWeight != o.VectorWeight:
		return fmt.Errorf("%w: content: VectorWeight %g not in [0, 1]", ErrBadSpec, o.VectorWeight)
	case o.MaxQueryTokens < 1:
		return fmt.Errorf("%w: content: MaxQueryTokens %d below 1", ErrBadSpec, o.MaxQueryTokens)
	case o.MaxPostings < 1:
		return fmt.Errorf("%w: content: MaxPostings %d below 1", ErrBadSpec, o.MaxPostings)
	case o.ExactVectors < 1:
		return fmt.Errorf("%w: content: ExactVectors %d below 1", ErrBadSpec, o.ExactVectors)
	case o.MaxCandidates < 1:
		return fmt.Errorf("%w: content: MaxCandidates %d below 1", ErrBadSpec, o.MaxCandidates)
	}
	return nil
}

// Content recommends items that resemble the session's last items by
// their catalogue records, so an item nobody has clicked yet has
// neighbours from the moment its record arrives.
//
// Each record's attributes become tokens ([Tokens]); an item is a TF-IDF
// vector over them, with the usual smoothed weights (as in common text
// retrieval libraries): tf is the token's count in the record, idf(t) =
// ln((1+N)/(1+df_t)) + 1 over the N items with tokens, and the similarity
// of two items is the cosine of their tf·idf vectors. Records with a dense
// vector add the cosine of the vectors (negative cosines count as 0), mixed
// by VectorWeight. Nothing is precomputed per pair: the idf of every token
// moves as items arrive, so a lookup walks the inverted index (token →
// items) from the query item's tokens and computes exact cosines for what
// it finds. A later record for an item replaces the earlier one.
type Content struct {
	opts ContentOptions
	cat  *Catalog

	tokID  map[string]uint32
	tokStr []string
	lnDF   []float64 // ln(1+df) per token, kept with df so lookups need no log
	df     []uint32
	post   [][]posting // per token, ascending item id
	items  []cItem
	nDocs  int // items with at least one token
	vecs   map[int]*vecIndex

	dirty    []ItemID
	newToks  []uint32 // tokens created since the last flush
	prefix   string
	scratchP sync.Pool // *contentScratch
}

type posting struct {
	item ItemID
	tf   float32
}

type tokTF struct {
	tok uint32
	tf  float32
}

type cItem struct {
	toks  []tokTF // ascending token id
	vec   []float32
	vnorm float64
	known bool
	dirty bool
}

// NewContent returns an empty content model filtering through cat (nil:
// everything is available).
func NewContent(opts ContentOptions, cat *Catalog) (*Content, error) {
	if err := opts.validate(); err != nil {
		return nil, err
	}
	c := &Content{opts: opts, cat: cat, tokID: map[string]uint32{}, vecs: map[int]*vecIndex{}}
	c.scratchP.New = func() any { return new(contentScratch) }
	return c, nil
}

func (c *Content) Name() string {
	d := DefaultContentOptions()
	var ps []string
	if c.opts.MaxCandidates != d.MaxCandidates {
		ps = append(ps, "candidates="+strconv.Itoa(c.opts.MaxCandidates))
	}
	if c.opts.ExactVectors != d.ExactVectors {
		ps = append(ps, "exact="+strconv.Itoa(c.opts.ExactVectors))
	}
	if c.opts.MaxPostings != d.MaxPostings {
		ps = append(ps, "postings="+strconv.Itoa(c.opts.MaxPostings))
	}
	if c.opts.MaxQueryTokens != d.MaxQueryTokens {
		ps = append(ps, "qtokens="+strconv.Itoa(c.opts.MaxQueryTokens))
	}
	if c.opts.Span != d.Span {
		ps = append(ps, "span="+strconv.Itoa(c.opts.Span))
	}
	if c.opts.VectorWeight != d.VectorWeight {
		ps = append(ps, "vector="+ftoa(c.opts.VectorWeight))
	}
	if len(ps) == 0 {
		return "content"
	}
	return "content(" + strings.Join(ps, ",") + ")"
}

// Observe ignores clicks: content comes from catalogue records.
func (c *Content) Observe(*Observation) {}

// Items returns the number of items with a record.
func (c *Content) Items() int {
	n := 0
	for i := range c.items {
		if c.items[i].known {
			n++
		}
	}
	return n
}

// Has reports whether id has a record with tokens or a vector.
func (c *Content) Has(id ItemID) bool {
	if int(id) >= len(c.items) {
		return false
	}
	it := &c.items[id]
	return len(it.toks) > 0 || it.vnorm > 0
}

// ObserveItem indexes a catalogue record, replacing any earlier one.
func (c *Content) ObserveItem(info *ItemInfo) {
	toks := c.intern(Tokens(info.Attrs))
	c.setItem(info.Item, toks, info.Vector)
}

// intern turns tokens into sorted (token id, tf) pairs, creating ids for
// new tokens in the order they come (deterministic: Tokens is).
func (c *Content) intern(toks []string) []tokTF {
	var out []tokTF
	for _, t := range toks {
		id, ok := c.tokID[t]
		if !ok {
			id = uint32(len(c.tokStr))
			c.tokID[t] = id
			c.tokStr = append(c.tokStr, t)
			c.lnDF = append(c.lnDF, 0)
			c.df = append(c.df, 0)
			c.post = append(c.post, nil)
			c.newToks = append(c.newToks, id)
		}
		out = append(out, tokTF{tok: id, tf: 1})
	}
	slices.SortFunc(out, func(a, b tokTF) int { return int(a.tok) - int(b.tok) })
	// merge repeats into counts
	w := 0
	for _, e := range out {
		if w > 0 && out[w-1].tok == e.tok {
			out[w-1].tf++
			continue
		}
		out[w] = e
		w++
	}
	return out[:w]
}

func (c *Content) setItem(id ItemID, toks []tokTF, vec []float32) {
	if int(id) >= len(c.items) {
		c.items = append(c.items, make([]cItem, int(id)+1-len(c.items))...)
	}
	it := &c.items[id]
	if it.known && slices.Equal(it.toks, toks) && slices.Equal(it.vec, vec) && (len(vec) == 0) == (it.vnorm == 0) {
		return // the same record again (a re-sent catalogue): nothing to do
	}
	if len(it.toks) > 0 {
		c.nDocs--
		for _, e := range it.toks {
			c.df[e.tok]--
			c.lnDF[e.tok] = math.Log1p(float64(c.df[e.tok]))
			l := c.post[e.tok]
			if i, ok := slices.BinarySearchFunc(l, id, cmpPosting); ok {
				c.post[e.tok] = slices.Delete(l, i, i+1)
			}
		}
	}
	if it.vnorm > 0 {
		c.vecs[len(it.vec)].remove(id)
	}
	it.toks, it.vec, it.vnorm, it.known = toks, nil, 0, true
	if len(toks) > 0 {
		c.nDocs++
		for _, e := range toks {
			c.df[e.tok]++
			c.lnDF[e.tok] = math.Log1p(float64(c.df[e.tok]))
			l := c.post[e.tok]
			if n := len(l); n == 0 || l[n-1].item < id {
				l = append(l, posting{id, e.tf})
			} else {
				i, _ := slices.BinarySearchFunc(l, id, cmpPosting)
				l = slices.Insert(l, i, posting{id, e.tf})
			}
			c.post[e.tok] = l
		}
	}
	if n := norm32(vec); n > 0 {
		it.vec, it.vnorm = slices.Clone(vec), n
		vi := c.vecs[len(vec)]
		if vi == nil {
			vi = newVecIndex(len(vec))
			c.vecs[len(vec)] = vi
		}
		vi.add(id, it.vec, c.opts.ExactVectors)
	}
	if !it.dirty {
		it.dirty = true
		c.dirty = append(c.dirty, id)
	}
}

func cmpPosting(p posting, id ItemID) int {
	switch {
	case p.item < id:
		return -1
	case p.item > id:
		return 1
	}
	return 0
}

func norm32(v []float32) float64 {
	s := 0.0
	for _, x := range v {
		s += float64(x) * float64(x)
	}
	return math.Sqrt(s)
}

// idf returns token t's smoothed idf given lnN = ln(1+N).
func (c *Content) idf(t uint32, lnN float64) float64 { return lnN - c.lnDF[t] + 1 }

// tnorm returns the norm of id's tf·idf vector.
func (c *Content) tnorm(id ItemID, lnN float64) float64 {
	s := 0.0
	for _, e := range c.items[id].toks {
		w := float64(e.tf) * c.idf(e.tok, lnN)
		s += w * w
	}
	return math.Sqrt(s)
}

// Similarity returns the content similarity of a and b in [0, 1] (0 when
// either has no record).
func (c *Content) Similarity(a, b ItemID) float64 {
	if a == b && c.Has(a) {
		return 1
	}
	if !c.Has(a) || !c.Has(b) {
		return 0
	}
	lnN := math.Log1p(float64(c.nDocs))
	return c.similarity(a, b, c.tnorm(a, lnN), lnN)
}

// similarity is Similarity for two items with records, given a's tf·idf
// norm na and lnN = ln(1+N).
func (c *Content) similarity(a, b ItemID, na, lnN float64) float64 {
	ia, ib := &c.items[a], &c.items[b]
	tok := -1.0
	if len(ia.toks) > 0 && len(ib.toks) > 0 {
		dot := 0.0
		x, y := ia.toks, ib.toks
		for len(x) > 0 && len(y) > 0 {
			switch {
			case x[0].tok < y[0].tok:
				x = x[1:]
			case x[0].tok > y[0].tok:
				y = y[1:]
			default:
				w := c.idf(x[0].tok, lnN)
				dot += float64(x[0].tf) * float64(y[0].tf) * w * w
				x, y = x[1:], y[1:]
			}
		}
		tok = 0
		if dot > 0 {
			tok = dot / (na * c.tnorm(b, lnN))
		}
	}
	vec := -1.0
	if ia.vnorm > 0 && ib.vnorm > 0 && len(ia.vec) == len(ib.vec) {
		vec = max(dot32(ia.vec, ib.vec)/(ia.vnorm*ib.vnorm), 0)
	}
	return c.mix(tok, vec)
}

// mix combines the token and vector cosines; a negative argument means
// "not applicable".
func (c *Content) mix(tok, vec float64) float64 {
	switch {
	case tok >= 0 && vec >= 0:
		return (1-c.opts.VectorWeight)*tok + c.opts.VectorWeight*vec
	case tok >= 0:
		return tok
	case vec >= 0:
		return vec
	}
	return 0
}

func dot32(a, b []float32) float64 {
	s := 0.0
	for i := range a {
		s += float64(a[i]) * float64(b[i])
	}
	return s
}

type contentScratch struct {
	seen  []uint32 // per item: the generation that last saw it
	gen   uint32
	cands []ItemID
	qtoks []tokTF
	vcand []ItemID
}

// mark records b as a candidate of this lookup, reporting whether it is new.
func (sc *contentScratch) mark(b ItemID) bool {
	if int(b) >= len(sc.seen) {
		sc.seen = append(sc.seen, make([]uint32, int(b)+1-len(sc.seen))...)
	}
	if sc.seen[b] == sc.gen {
		return false
	}
	sc.seen[b] = sc.gen
	sc.cands = append(sc.cands, b)
	return true
}

// neighbors calls f with items similar to a (not a itself), once each, in
// ascending id order, with their exact similarity. Candidates come from
// the inverted index, rarest of a's tokens first (they name the closest
// items), newest items first within a token, until MaxCandidates are
// found; then the vector index adds its own.
func (c *Content) neighbors(a ItemID, sc *contentScratch, f func(b ItemID, sim float64)) {
	if !c.Has(a) {
		return
	}
	lnN := math.Log1p(float64(c.nDocs))
	ia := &c.items[a]
	sc.gen++
	if sc.gen == 0 { // wrapped: forget every old mark
		clear(sc.seen)
		sc.gen = 1
	}
	sc.cands = sc.cands[:0]
	if len(ia.toks) > 0 {
		sc.qtoks = append(sc.qtoks[:0], ia.toks...)
		slices.SortFunc(sc.qtoks, func(x, y tokTF) int {
			// rarest first: lower df, then lower token id
			switch dx, dy := c.df[x.tok], c.df[y.tok]; {
			case dx < dy:
				return -1
			case dx > dy:
				return 1
			}
			return int(x.tok) - int(y.tok)
		})
		if len(sc.qtoks) > c.opts.MaxQueryTokens {
			sc.qtoks = sc.qtoks[:c.opts.MaxQueryTokens]
		}
	walk:
		for _, e := range sc.qtoks {
			l := c.post[e.tok]
			for i, n := len(l)-1, 0; i >= 0 && n < c.opts.MaxPostings; i, n = i-1, n+1 {
				if b := l[i].item; b != a && sc.mark(b) && len(sc.cands) >= c.opts.MaxCandidates {
					break walk
				}
			}
		}
	}
	if ia.vnorm > 0 {
		if vi := c.vecs[len(ia.vec)]; vi != nil {
			sc.vcand = vi.candidates(ia.vec, c.opts.ExactVectors, sc.vcand[:0])
			for _, b := range sc.vcand {
				if b != a {
					sc.mark(b)
				}
			}
		}
	}
	slices.Sort(sc.cands)
	na := c.tnorm(a, lnN)
	for _, b := range sc.cands {
		if s := c.similarity(a, b, na, lnN); s > 0 {
			f(b, s)
		}
	}
}

// Neighbors returns up to k items most similar to a, most similar first,
// ties by lower id, unavailable items left out.
func (c *Content) Neighbors(a ItemID, k int) []Neighbor {
	sc := c.scratchP.Get().(*contentScratch)
	defer c.scratchP.Put(sc)
	var all []Neighbor
	c.neighbors(a, sc, func(b ItemID, s float64) {
		if c.cat == nil || c.cat.Available(b) {
			all = append(all, Neighbor{b, s})
		}
	})
	slices.SortFunc(all, func(x, y Neighbor) int { return cmpScore(x.Score, y.Score, x.Item, y.Item) })
	if len(all) > k {
		all = all[:k]
	}
	return all
}

// voters calls f with the session's last Span distinct items and their
// position weights, most recent first.
func (c *Content) voters(q *Query, f func(a ItemID, pw float64)) {
	n := 0
	for i := len(q.Session) - 1; i >= 0 && n < c.opts.Span; i-- {
		a := q.Session[i].Item
		if seenBefore(q.Session[i+1:], a) {
			continue
		}
		f(a, 1/float64(1+n))
		n++
	}
}

// Candidates adds the content neighbours of the session's last items,
// each weighted by its voter's position weight. The last item itself and
// unavailable items are left out.
func (c *Content) Candidates(q *Query, out *Scores) {
	last, ok := q.Last()
	if !ok {
		return
	}
	sc := c.scratchP.Get().(*contentScratch)
	defer c.scratchP.Put(sc)
	c.voters(q, func(a ItemID, pw float64) {
		c.neighbors(a, sc, func(b ItemID, s float64) {
			if b == last || (c.cat != nil && !c.cat.Available(b)) {
				return
			}
			out.Add(b, pw*s)
		})
	})
}

// ScoreItems writes each item's position-weighted similarity to the
// session's last items, as Candidates would score it.
func (c *Content) ScoreItems(q *Query, items []ItemID, out []float64) {
	clear(out)
	last, _ := q.Last()
	c.voters(q, func(a ItemID, pw float64) {
		for i, b := range items {
			if b != a && b != last {
				out[i] += pw * c.Similarity(a, b)
			}
		}
	})
}

// Affinity writes each item's similarity to the session in [0, 1]: the
// position-weighted mean of its similarity to the session's last items.
// Fresh-item exploration uses it to prefer fresh items that resemble the
// session.
func (c *Content) Affinity(q *Query, items []ItemID, out []float64) {
	clear(out)
	total := 0.0
	c.voters(q, func(a ItemID, pw float64) {
		total += pw
		for i, b := range items {
			out[i] += pw * c.Similarity(a, b)
		}
	})
	if total > 0 {
		for i := range out {
			out[i] /= total
		}
	}
}

// InCategory returns up to n of the newest items (highest ids) with a
// record in category path or below it, available ones only.
func (c *Content) InCategory(path string, n int) []ItemID {
	t, ok := c.tokID[tokCategory+NormalizeCategory(path)]
	if !ok {
		return nil
	}
	var out []ItemID
	l := c.post[t]
	for i := len(l) - 1; i >= 0 && len(out) < n; i-- {
		if c.cat == nil || c.cat.Available(l[i].item) {
			out = append(out, l[i].item)
		}
	}
	return out
}

func (c *Content) SetPrefix(prefix string) { c.prefix = prefix }
func (c *Content) Prefix() string          { return c.prefix }

// Storage: prefix+"i/"+bigEndian(item) holds a record: uvarint token
// count, then (uvarint token id, uvarint tf) pairs, then uvarint vector
// length and the vector's float32 bits; prefix+"t/"+bigEndian(token) holds
// a token's text. A flush writes the records that changed and the tokens
// created since the last flush.
func (c *Content) Flush(kv KV) error {
	for _, t := range c.newToks {
		k := make([]byte, 0, len(c.prefix)+6)
		k = append(append(k, c.prefix...), 't', '/')
		k = binary.BigEndian.AppendUint32(k, t)
		if err := kv.Set(k, []byte(c.tokStr[t])); err != nil {
			return fmt.Errorf("flush content token %d: %w", t, err)
		}
	}
	c.newToks = c.newToks[:0]
	for _, id := range c.dirty {
		it := &c.items[id]
		it.dirty = false
		b := binary.AppendUvarint(nil, uint64(len(it.toks)))
		for _, e := range it.toks {
			b = binary.AppendUvarint(b, uint64(e.tok))
			b = binary.AppendUvarint(b, uint64(e.tf))
		}
		b = binary.AppendUvarint(b, uint64(len(it.vec)))
		for _, x := range it.vec {
			b = binary.BigEndian.AppendUint32(b, math.Float32bits(x))
		}
		if err := kv.Set(itemKey(c.prefix+"i/", id), b); err != nil {
			return fmt.Errorf("flush content item %d: %w", id, err)
		}
	}
	c.dirty = c.dirty[:0]
	return nil
}

// Load restores one entry written by Flush. Records arrive before tokens
// (key order); a record may name a token whose text comes later.
func (c *Content) Load(key, val []byte) error {
	k := key[len(c.prefix):]
	if len(k) != 6 || k[1] != '/' {
		return fmt.Errorf("%w: content key %q", ErrCorrupt, key)
	}
	id := binary.BigEndian.Uint32(k[2:])
	switch k[0] {
	case 't':
		c.growTokens(id)
		s := string(val)
		c.tokStr[id] = s
		c.tokID[s] = id
		return nil
	case 'i':
		toks, vec, err := decodeContentItem(val)
		if err != nil {
			return fmt.Errorf("content item %d: %w", id, err)
		}
		for _, e := range toks {
			c.growTokens(e.tok)
		}
		c.setItem(id, toks, vec)
		c.items[id].dirty = false
		c.dirty = c.dirty[:0]
		return nil
	}
	return fmt.Errorf("%w: content key %q", ErrCorrupt, key)
}

func (c *Content) growTokens(t uint32) {
	for uint32(len(c.tokStr)) <= t {
		c.tokStr = append(c.tokStr, "")
		c.lnDF = append(c.lnDF, 0)
		c.df = append(c.df, 0)
		c.post = append(c.post, nil)
	}
}

func decodeContentItem(b []byte) ([]tokTF, []float32, error) {
	bad := fmt.Errorf("%w: content record of %d bytes", ErrCorrupt, len(b))
	n, w := binary.Uvarint(b)
	if w <= 0 || n > uint64(len(b)) {
		return nil, nil, bad
	}
	b = b[w:]
	var toks []tokTF
	for range n {
		t, w1 := binary.Uvarint(b)
		if w1 <= 0 || t > math.MaxUint32 {
			return nil, nil, bad
		}
		tf, w2 := binary.Uvarint(b[w1:])
		if w2 <= 0 || tf == 0 {
			return nil, nil, bad
		}
		b = b[w1+w2:]
		toks = append(toks, tokTF{tok: uint32(t), tf: float32(tf)})
	}
	vl, w := binary.Uvarint(b)
	if w <= 0 || uint64(len(b)-w) != 4*vl {
		return nil, nil, bad
	}
	b = b[w:]
	var vec []float32
	for i := 0; i < len(b); i += 4 {
		vec = append(vec, math.Float32frombits(binary.BigEndian.Uint32(b[i:])))
	}
	return toks, vec, nil
}
