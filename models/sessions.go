package models

import (
	"encoding/binary"
	"fmt"
	"slices"
	"strconv"
	"strings"
	"time"
)

// SessionIndexOptions bound the past sessions the session-kNN models search.
type SessionIndexOptions struct {
	// Retention drops a session whose last click is older than this, in
	// event time, behind the newest click seen (default 30 days).
	Retention time.Duration
	// MaxSessions caps the sessions held; past it the oldest go first
	// (default 1,000,000).
	MaxSessions int
	// MaxLen caps the distinct items kept per session; later items of a
	// longer session are not indexed (default 50).
	MaxLen int
	// Postings caps each item's list of the most recent sessions holding
	// it (default 1000). A query samples the most recent M sessions from
	// these lists, exactly so while M <= Postings.
	Postings int
}

// DefaultSessionIndexOptions returns the defaults documented on
// [SessionIndexOptions].
func DefaultSessionIndexOptions() SessionIndexOptions {
	return SessionIndexOptions{Retention: 30 * 24 * time.Hour, MaxSessions: 1_000_000, MaxLen: 50, Postings: 1000}
}

func (o *SessionIndexOptions) validate() error {
	d := DefaultSessionIndexOptions()
	if o.Retention == 0 {
		o.Retention = d.Retention
	}
	if o.MaxSessions == 0 {
		o.MaxSessions = d.MaxSessions
	}
	if o.MaxLen == 0 {
		o.MaxLen = d.MaxLen
	}
	if o.Postings == 0 {
		o.Postings = d.Postings
	}
	switch {
	case o.Retention < time.Minute:
		return fmt.Errorf("%w: sessions: Retention %s below 1m", ErrBadSpec, o.Retention)
	case o.MaxSessions < 1:
		return fmt.Errorf("%w: sessions: MaxSessions %d below 1", ErrBadSpec, o.MaxSessions)
	case o.MaxLen < 1 || o.MaxLen > 10000:
		return fmt.Errorf("%w: sessions: MaxLen %d not in 1..10000", ErrBadSpec, o.MaxLen)
	case o.Postings < 1:
		return fmt.Errorf("%w: sessions: Postings %d below 1", ErrBadSpec, o.Postings)
	}
	return nil
}

// key is the index's spec in a Set: "sessions" with every non-default
// option, so models that agree on the options share one index.
func (o SessionIndexOptions) key() string {
	d := DefaultSessionIndexOptions()
	var ps []string
	if o.MaxSessions != d.MaxSessions {
		ps = append(ps, "cap="+strconv.Itoa(o.MaxSessions))
	}
	if o.MaxLen != d.MaxLen {
		ps = append(ps, "len="+strconv.Itoa(o.MaxLen))
	}
	if o.Postings != d.Postings {
		ps = append(ps, "postings="+strconv.Itoa(o.Postings))
	}
	if o.Retention != d.Retention {
		ps = append(ps, "retention="+strconv.FormatFloat(o.Retention.Hours()/24, 'g', -1, 64))
	}
	if len(ps) == 0 {
		return "sessions"
	}
	return "sessions(" + strings.Join(ps, ",") + ")"
}

// SessionIndex holds recent past sessions for the session-kNN models:
// each session's distinct items in first-click order, and per item the
// ascending numbers of the stored sessions that contain it. Sessions live in
// a ring indexed by session number, so a lookup is one subtraction and
// eviction (always of the lowest numbers: the oldest sessions) is a pop from
// the front. A query reads only the posting lists of its own items, so its
// cost does not depend on how many sessions are stored.
//
// Invariant: posting lists hold only stored sessions. Eviction removes the
// lowest number, which is at the front of any list that still holds it.
type SessionIndex struct {
	opts  SessionIndexOptions
	base  uint64    // session number of ring[0]
	ring  []sessRec // ring[i] is session base+i; empty slots have no items
	live  int       // non-empty slots
	post  [][]uint64
	df    []uint32 // stored sessions containing each item (lists are capped, so counted apart)
	maxTS int64

	dirty     []uint64 // sessions changed since the last flush
	gone      []uint64 // sessions evicted since the last flush
	metaDirty bool
	prefix    string
}

type sessRec struct {
	items []ItemID
	last  int64  // latest click, event time ms
	hash  uint64 // HashSession of the visitor's id, to forget on request
	dirty bool
}

// NewSessionIndex returns an empty index.
func NewSessionIndex(opts SessionIndexOptions) (*SessionIndex, error) {
	if err := opts.validate(); err != nil {
		return nil, err
	}
	return &SessionIndex{opts: opts}, nil
}

func (x *SessionIndex) Name() string { return x.opts.key() }

// Options returns the effective options.
func (x *SessionIndex) Options() SessionIndexOptions { return x.opts }

// Len returns the number of sessions held.
func (x *SessionIndex) Len() int { return x.live }

// Candidates adds nothing: the index serves the session-kNN models.
func (x *SessionIndex) Candidates(*Query, *Scores) {}

// ScoreItems writes zeros.
func (x *SessionIndex) ScoreItems(_ *Query, _ []ItemID, out []float64) { clear(out) }

// Observe adds the click to its session. Clicks of untracked sessions
// (number 0) and of sessions already evicted are ignored.
func (x *SessionIndex) Observe(o *Observation) {
	if o.SessionNo == 0 {
		return
	}
	if o.TS > x.maxTS {
		x.maxTS = o.TS
		x.metaDirty = true
	}
	x.add(o.SessionNo, o.SessionHash, o.Item, o.TS)
	x.evict()
}

func (x *SessionIndex) add(no, hash uint64, item ItemID, ts int64) {
	if no < x.base {
		return
	}
	if len(x.ring) == 0 {
		x.base = no // nothing held: start the ring here rather than pad it
		x.metaDirty = true
	}
	idx := no - x.base
	if idx >= uint64(len(x.ring)) {
		if idx-uint64(len(x.ring)) > uint64(x.opts.MaxSessions) {
			// A jump in numbering larger than the whole store: everything
			// held would be evicted by the padding anyway.
			x.evictAll()
			x.base, idx = no, 0
			x.metaDirty = true
		}
		for uint64(len(x.ring)) <= idx {
			x.ring = append(x.ring, sessRec{})
		}
	}
	r := &x.ring[idx]
	if r.items == nil {
		x.live++
		r.hash = hash
	}
	if ts > r.last {
		r.last = ts
	}
	x.markDirty(no, r)
	if slices.Contains(r.items, item) || len(r.items) >= x.opts.MaxLen {
		return
	}
	if r.items == nil {
		r.items = make([]ItemID, 0, 4)
	}
	r.items = append(r.items, item)
	x.growItems(item)
	x.df[item]++
	x.insertPosting(item, no)
}

func (x *SessionIndex) markDirty(no uint64, r *sessRec) {
	if !r.dirty {
		r.dirty = true
		x.dirty = append(x.dirty, no)
	}
}

func (x *SessionIndex) growItems(id ItemID) {
	if int(id) >= len(x.post) {
		n := int(id) + 1
		x.post = append(x.post, make([][]uint64, n-len(x.post))...)
		x.df = append(x.df, make([]uint32, n-len(x.df))...)
	}
}

// insertPosting adds no to item's ascending list. Clicks arrive mostly for
// the newest sessions, so the usual case is an append. A list past 1.5
// times its cap is cut back to its newest Postings entries: the cut point
// depends only on the clicks seen, and a query reads only the newest
// Postings entries, so what a query sees does not depend on when cuts
// happened (nor on whether the lists were rebuilt by Load).
func (x *SessionIndex) insertPosting(item ItemID, no uint64) {
	l := x.post[item]
	if n := len(l); n == 0 || l[n-1] < no {
		l = append(l, no)
	} else {
		i, _ := slices.BinarySearch(l, no)
		l = slices.Insert(l, i, no)
	}
	if p := x.opts.Postings; len(l) > p+p/2 {
		l = append(l[:0], l[len(l)-p:]...)
	}
	x.post[item] = l
}

// evict drops sessions from the front while the store is over its cap or
// the front session is past retention.
func (x *SessionIndex) evict() {
	horizon := x.maxTS - x.opts.Retention.Milliseconds()
	for len(x.ring) > 0 {
		r := &x.ring[0]
		if r.items != nil && x.live <= x.opts.MaxSessions && r.last >= horizon {
			return
		}
		x.popFront()
	}
}

func (x *SessionIndex) evictAll() {
	for len(x.ring) > 0 {
		x.popFront()
	}
}

func (x *SessionIndex) popFront() {
	r := &x.ring[0]
	no := x.base
	if r.items != nil {
		for _, it := range r.items {
			x.df[it]--
			if l := x.post[it]; len(l) > 0 && l[0] == no {
				if len(l) == 1 {
					x.post[it] = nil
				} else {
					x.post[it] = l[1:]
				}
			}
		}
		x.live--
		x.gone = append(x.gone, no)
	}
	x.ring[0] = sessRec{}
	x.ring = x.ring[1:]
	x.base++
	x.metaDirty = true
}

// ForgetSession deletes every stored session of the visitor whose id
// hashes to hash ([HashSession]): from the sessions, the posting lists and,
// at the next flush, the store. It scans the stored sessions, which is
// fine for a request that comes from the log now and then.
func (x *SessionIndex) ForgetSession(hash uint64) {
	for i := range x.ring {
		r := &x.ring[i]
		if r.items == nil || r.hash != hash {
			continue
		}
		no := x.base + uint64(i)
		for _, it := range r.items {
			x.df[it]--
			l := x.post[it]
			if j, ok := slices.BinarySearch(l, no); ok {
				x.post[it] = slices.Delete(l, j, j+1)
			}
		}
		x.live--
		x.gone = append(x.gone, no)
		*r = sessRec{}
	}
	x.evict() // keeps the front slot non-empty
}

// session returns the stored session no, or nil.
func (x *SessionIndex) session(no uint64) *sessRec {
	if no < x.base || no-x.base >= uint64(len(x.ring)) {
		return nil
	}
	r := &x.ring[no-x.base]
	if r.items == nil {
		return nil
	}
	return r
}

// Session returns the stored items of session no in first-click order and
// its last click time; ok is false when it is not held. The slice must not
// be modified.
func (x *SessionIndex) Session(no uint64) (items []ItemID, last int64, ok bool) {
	r := x.session(no)
	if r == nil {
		return nil, 0, false
	}
	return r.items, r.last, true
}

// postings returns the newest Postings entries of item's list.
func (x *SessionIndex) postings(item ItemID) []uint64 {
	if int(item) >= len(x.post) {
		return nil
	}
	l := x.post[item]
	if p := x.opts.Postings; len(l) > p {
		l = l[len(l)-p:]
	}
	return l
}

// DF returns the number of stored sessions that contain item.
func (x *SessionIndex) DF(item ItemID) int {
	if int(item) >= len(x.df) {
		return 0
	}
	return int(x.df[item])
}

func (x *SessionIndex) SetPrefix(prefix string) { x.prefix = prefix }
func (x *SessionIndex) Prefix() string          { return x.prefix }

// Storage: prefix+"m" holds base and the newest click time (16 bytes);
// prefix+"s/"+bigEndian(no) holds a session: last click time (8 bytes),
// the visitor's id hash (8 bytes), then its items (4 bytes each). A flush writes the sessions that changed
// and deletes the ones evicted.
func (x *SessionIndex) Flush(kv KV) error {
	if x.metaDirty {
		b := binary.BigEndian.AppendUint64(nil, x.base)
		b = binary.BigEndian.AppendUint64(b, uint64(x.maxTS))
		if err := kv.Set([]byte(x.prefix+"m"), b); err != nil {
			return fmt.Errorf("flush session index meta: %w", err)
		}
		x.metaDirty = false
	}
	for _, no := range x.gone {
		if err := kv.Delete(x.sessKey(no)); err != nil {
			return fmt.Errorf("flush evicted session %d: %w", no, err)
		}
	}
	x.gone = x.gone[:0]
	for _, no := range x.dirty {
		r := x.session(no)
		if r == nil {
			continue // evicted since: deleted above
		}
		r.dirty = false
		b := make([]byte, 0, 16+4*len(r.items))
		b = binary.BigEndian.AppendUint64(b, uint64(r.last))
		b = binary.BigEndian.AppendUint64(b, r.hash)
		for _, it := range r.items {
			b = binary.BigEndian.AppendUint32(b, it)
		}
		if err := kv.Set(x.sessKey(no), b); err != nil {
			return fmt.Errorf("flush session %d: %w", no, err)
		}
	}
	x.dirty = x.dirty[:0]
	return nil
}

func (x *SessionIndex) sessKey(no uint64) []byte {
	k := make([]byte, 0, len(x.prefix)+10)
	k = append(k, x.prefix...)
	k = append(k, 's', '/')
	return binary.BigEndian.AppendUint64(k, no)
}

// Load restores one entry. Keys arrive in key order: the meta entry first,
// then sessions by ascending number, so posting lists rebuild by appends.
func (x *SessionIndex) Load(key, val []byte) error {
	k := key[len(x.prefix):]
	switch {
	case string(k) == "m" && len(val) == 16:
		x.base = binary.BigEndian.Uint64(val)
		x.maxTS = int64(binary.BigEndian.Uint64(val[8:]))
		return nil
	case len(k) == 10 && k[0] == 's' && k[1] == '/' && len(val) >= 16 && (len(val)-16)%4 == 0:
		no := binary.BigEndian.Uint64(k[2:])
		if no < x.base {
			return fmt.Errorf("%w: session %d below the index base %d", ErrCorrupt, no, x.base)
		}
		if len(val) == 16 {
			return fmt.Errorf("%w: session %d with no items", ErrCorrupt, no)
		}
		// The lowest stored session is the base: eviction never leaves an
		// empty slot at the front, so add's own choice of base for an empty
		// ring agrees with the stored one.
		last, hash := int64(binary.BigEndian.Uint64(val)), binary.BigEndian.Uint64(val[8:])
		for i := 16; i < len(val); i += 4 {
			x.add(no, hash, binary.BigEndian.Uint32(val[i:]), last)
		}
		if r := x.session(no); r != nil {
			r.dirty = false
		}
		x.dirty = x.dirty[:0]
		x.metaDirty = false
		return nil
	}
	return fmt.Errorf("%w: session index key %q, %d value bytes", ErrCorrupt, key, len(val))
}
