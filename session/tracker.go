package session

import (
	"encoding/binary"
	"fmt"
	"slices"
	"sync"
	"time"

	"waymark/models"
)

// TrackerOptions configures a [Tracker].
type TrackerOptions struct {
	// Window is how many recent clicks a session keeps (default 20).
	Window int
	// Timeout ends a session after this much event time without a click
	// (default 30 minutes, common practice in session-based work).
	Timeout time.Duration
	// MaxSessions caps the sessions tracked at once; the least recently
	// active are evicted first (default 1,000,000).
	MaxSessions int
}

// DefaultTrackerOptions returns the defaults documented on TrackerOptions.
func DefaultTrackerOptions() TrackerOptions {
	return TrackerOptions{Window: 20, Timeout: 30 * time.Minute, MaxSessions: 1_000_000}
}

func (o *TrackerOptions) validate() error {
	d := DefaultTrackerOptions()
	if o.Window == 0 {
		o.Window = d.Window
	}
	if o.Timeout == 0 {
		o.Timeout = d.Timeout
	}
	if o.MaxSessions == 0 {
		o.MaxSessions = d.MaxSessions
	}
	switch {
	case o.Window < 1 || o.Window > 1000:
		return fmt.Errorf("%w: Window %d not in 1..1000", ErrBadOption, o.Window)
	case o.Timeout < time.Second:
		return fmt.Errorf("%w: Timeout %s below 1s", ErrBadOption, o.Timeout)
	case o.MaxSessions < 1:
		return fmt.Errorf("%w: MaxSessions %d below 1", ErrBadOption, o.MaxSessions)
	}
	return nil
}

const numShards = 64

// Tracker keeps each session's recent clicks. One goroutine observes clicks;
// any number read windows at the same time.
type Tracker struct {
	opts     TrackerOptions
	perShard int
	// persist turns on the bookkeeping of changed and removed sessions
	// for Flush; a tracker that is never flushed (replay) keeps none.
	persist bool
	shards  [numShards]shard
}

type shard struct {
	// mu protects every field below and the entries they hold.
	mu      sync.Mutex
	m       map[string]*entry
	lru     entry // sentinel: lru.next is the most recently active
	dirty   []*entry
	deleted []string
	// free holds removed entries for reuse, window buffers included, so
	// a tracker whose sessions come and go allocates nothing per click.
	free []*entry
	_    [64]byte // keeps neighbouring shards' locks off one cache line
}

// freeCap bounds each shard's free list: sessions start about as often as
// others end, so a few entries cover the difference of the moment.
const freeCap = 32

type entry struct {
	key        string
	no         uint64 // session instance number
	last       int64  // latest event time, unix ms
	touch      uint64 // global update counter at the last click: LRU order
	steps      []models.Step
	prev, next *entry
	dirty      bool
	dead       bool
}

// NewTracker returns an empty tracker.
func NewTracker(opts TrackerOptions) (*Tracker, error) {
	if err := opts.validate(); err != nil {
		return nil, err
	}
	t := &Tracker{opts: opts}
	t.perShard = max(1, (opts.MaxSessions+numShards-1)/numShards)
	for i := range t.shards {
		s := &t.shards[i]
		s.m = make(map[string]*entry)
		s.lru.next, s.lru.prev = &s.lru, &s.lru
	}
	return t, nil
}

// Persist makes the tracker keep what Flush needs: the sessions changed and
// removed since the last flush. Call it before the first Observe.
func (t *Tracker) Persist() { t.persist = true }

// Options returns the tracker's effective options.
func (t *Tracker) Options() TrackerOptions { return t.opts }

// shardFor picks a shard by an FNV-1a hash of the key. Eviction is per
// shard, so the hash must be the same in every process: a seeded hash would
// make eviction, and so the learned counts, differ between replicas.
func (t *Tracker) shardFor(key string) *shard {
	h := uint32(2166136261)
	for i := 0; i < len(key); i++ {
		h ^= uint32(key[i])
		h *= 16777619
	}
	return &t.shards[h%numShards]
}

func (s *shard) unlinkLocked(e *entry) {
	e.prev.next, e.next.prev = e.next, e.prev
	e.prev, e.next = nil, nil
}

func (s *shard) pushFrontLocked(e *entry) {
	e.next, e.prev = s.lru.next, &s.lru
	s.lru.next.prev = e
	s.lru.next = e
}

func (s *shard) markDirtyLocked(e *entry, persist bool) {
	if persist && !e.dirty {
		e.dirty = true
		s.dirty = append(s.dirty, e)
	}
}

func (s *shard) removeLocked(e *entry, persist bool) {
	s.unlinkLocked(e)
	delete(s.m, e.key)
	e.dead = true
	if persist {
		s.deleted = append(s.deleted, e.key)
	}
	// An entry on the dirty list is still read by the next flush (which
	// skips it as dead); any other is referenced by nothing now.
	if !e.dirty && len(s.free) < freeCap {
		s.free = append(s.free, e)
	}
}

// newEntryLocked returns an empty entry for session key, reusing a removed
// one when it can.
func (s *shard) newEntryLocked(key string, no uint64) *entry {
	n := len(s.free)
	if n == 0 {
		return &entry{key: key, no: no, steps: make([]models.Step, 0, 4)}
	}
	e := s.free[n-1]
	s.free[n-1] = nil
	s.free = s.free[:n-1]
	*e = entry{key: key, no: no, steps: e.steps[:0]}
	return e
}

// Click is what Observe reports about one click.
type Click struct {
	// Window is the session's clicks before this one, oldest first. It is
	// a copy in the caller's buffer.
	Window []models.Step
	// No is the session instance's number; New says it started here.
	No  uint64
	New bool
	// Repeat says the click repeats the session's last item.
	Repeat bool
}

// Observe records a click of session key on item at ts and reports the
// window before it. touch is the caller's update counter (it orders the
// LRU), nextNo numbers a new session instance. buf is reused for the window.
func (t *Tracker) Observe(key string, item models.ItemID, ts int64, touch uint64, nextNo func() uint64, buf []models.Step) Click {
	c, _ := t.observe(key, item, ts, touch, nextNo, buf, nil, false)
	return c
}

// Before is session key's state just before a click, as Window (with no
// timeout check) would have reported it.
type Before struct {
	Tracked bool
	No      uint64
	// Steps is the window: the click's Click.Window itself, unless the
	// click started a new instance after the timeout, when it is a copy
	// of the old window in the buffer given to ObserveBefore.
	Steps []models.Step
}

// ObserveBefore is Observe that also reports the session as it was before
// the click (see Before), so a caller that asks a query of the session
// right before each click (replay) finds the entry once instead of twice.
// before is the buffer for the old window of a session that timed out.
func (t *Tracker) ObserveBefore(key string, item models.ItemID, ts int64, touch uint64, nextNo func() uint64, buf, before []models.Step) (Click, Before) {
	return t.observe(key, item, ts, touch, nextNo, buf, before, true)
}

func (t *Tracker) observe(key string, item models.ItemID, ts int64, touch uint64, nextNo func() uint64, buf, before []models.Step, wantBefore bool) (Click, Before) {
	s := t.shardFor(key)
	s.mu.Lock()
	defer s.mu.Unlock()
	e := s.m[key]
	var c Click
	var b Before
	if e != nil {
		b.Tracked, b.No = true, e.no
	}
	copied := false
	if e != nil && ts-e.last > t.opts.Timeout.Milliseconds() {
		// The visitor came back after the timeout: a new session.
		if wantBefore {
			b.Steps = append(before[:0], e.steps...)
			copied = true
		}
		e.steps = e.steps[:0]
		e.no = nextNo()
		c.New = true
	}
	if e == nil {
		e = s.newEntryLocked(key, nextNo())
		s.m[key] = e
		s.pushFrontLocked(e)
		c.New = true
		for len(s.m) > t.perShard {
			s.removeLocked(s.lru.prev, t.persist)
		}
	}
	c.No = e.no
	c.Window = append(buf[:0], e.steps...)
	if b.Tracked && !copied {
		b.Steps = c.Window
	}
	if n := len(e.steps); n > 0 && e.steps[n-1].Item == item {
		c.Repeat = true
		e.steps[n-1].TS = ts
	} else {
		if len(e.steps) == t.opts.Window {
			copy(e.steps, e.steps[1:])
			e.steps = e.steps[:len(e.steps)-1]
		} else if len(e.steps) == cap(e.steps) {
			// Grow to the window at most, not by append's doubling: a
			// window of 20 would otherwise hold room for 32.
			grown := make([]models.Step, len(e.steps), min(2*cap(e.steps), t.opts.Window))
			copy(grown, e.steps)
			e.steps = grown
		}
		e.steps = append(e.steps, models.Step{Item: item, TS: ts})
	}
	e.last = max(e.last, ts)
	e.touch = touch
	if s.lru.next != e {
		s.unlinkLocked(e)
		s.pushFrontLocked(e)
	}
	s.markDirtyLocked(e, t.persist)
	return c, b
}

// Window copies session key's window into buf. ok is false for a session
// that is not tracked or that timed out before now (unix ms; 0 skips the
// check).
func (t *Tracker) Window(key string, now int64, buf []models.Step) (steps []models.Step, no uint64, ok bool) {
	s := t.shardFor(key)
	s.mu.Lock()
	defer s.mu.Unlock()
	e := s.m[key]
	if e == nil || (now > 0 && now-e.last > t.opts.Timeout.Milliseconds()) {
		return buf[:0], 0, false
	}
	return append(buf[:0], e.steps...), e.no, true
}

// Delete forgets session key; it reports whether the session was tracked.
func (t *Tracker) Delete(key string) bool {
	s := t.shardFor(key)
	s.mu.Lock()
	defer s.mu.Unlock()
	e := s.m[key]
	if e == nil {
		return false
	}
	s.removeLocked(e, t.persist)
	return true
}

// Expire releases every session whose last click is older than the
// timeout before now (unix ms), returning how many it released.
func (t *Tracker) Expire(now int64) int {
	cutoff := now - t.opts.Timeout.Milliseconds()
	n := 0
	for i := range t.shards {
		s := &t.shards[i]
		s.mu.Lock()
		// The LRU runs in update order, which follows event time closely;
		// stopping at the first live entry keeps the sweep cheap and a
		// function of the stream alone.
		for e := s.lru.prev; e != &s.lru && e.last < cutoff; e = s.lru.prev {
			s.removeLocked(e, t.persist)
			n++
		}
		s.mu.Unlock()
	}
	return n
}

// Len returns the number of tracked sessions.
func (t *Tracker) Len() int {
	n := 0
	for i := range t.shards {
		s := &t.shards[i]
		s.mu.Lock()
		n += len(s.m)
		s.mu.Unlock()
	}
	return n
}

// DirtyBytes estimates what the next Flush writes.
func (t *Tracker) DirtyBytes() int {
	n := 0
	for i := range t.shards {
		s := &t.shards[i]
		s.mu.Lock()
		n += len(s.dirty)*(48+8*t.opts.Window) + 32*len(s.deleted)
		s.mu.Unlock()
	}
	return n
}

// sessionPrefix is the store prefix of session windows.
const sessionPrefix = "s/"

// Flush writes the sessions changed since the last flush and deletes the
// released ones.
func (t *Tracker) Flush(kv models.KV) error {
	for i := range t.shards {
		s := &t.shards[i]
		s.mu.Lock()
		err := s.flushLocked(kv)
		s.mu.Unlock()
		if err != nil {
			return err
		}
	}
	return nil
}

func (s *shard) flushLocked(kv models.KV) error {
	for _, k := range s.deleted {
		if err := kv.Delete([]byte(sessionPrefix + k)); err != nil {
			return fmt.Errorf("flush sessions: %w", err)
		}
	}
	s.deleted = s.deleted[:0]
	for _, e := range s.dirty {
		e.dirty = false
		if e.dead {
			continue
		}
		if err := kv.Set([]byte(sessionPrefix+e.key), encodeEntry(e)); err != nil {
			return fmt.Errorf("flush sessions: %w", err)
		}
	}
	s.dirty = s.dirty[:0]
	return nil
}

// encodeEntry: uvarint no, varint last, uvarint touch, uvarint n, then n ×
// (uint32 item, varint ts delta from last).
func encodeEntry(e *entry) []byte {
	b := make([]byte, 0, 24+len(e.steps)*8)
	b = binary.AppendUvarint(b, e.no)
	b = binary.AppendVarint(b, e.last)
	b = binary.AppendUvarint(b, e.touch)
	b = binary.AppendUvarint(b, uint64(len(e.steps)))
	for _, st := range e.steps {
		b = binary.BigEndian.AppendUint32(b, st.Item)
		b = binary.AppendVarint(b, e.last-st.TS)
	}
	return b
}

func decodeEntry(key string, b []byte) (*entry, error) {
	e := &entry{key: key}
	var n int
	var ok bool
	read := func(f func([]byte) (uint64, int)) uint64 {
		v, k := f(b)
		if k <= 0 {
			ok = false
			return 0
		}
		b = b[k:]
		return v
	}
	ok = true
	e.no = read(binary.Uvarint)
	e.last = int64(read(func(p []byte) (uint64, int) { v, k := binary.Varint(p); return uint64(v), k }))
	e.touch = read(binary.Uvarint)
	cnt := read(binary.Uvarint)
	if !ok || cnt > 1000 {
		return nil, fmt.Errorf("%w: session %q header", ErrCorrupt, key)
	}
	e.steps = make([]models.Step, 0, cnt)
	for ; n < int(cnt); n++ {
		if len(b) < 4 {
			return nil, fmt.Errorf("%w: session %q step %d", ErrCorrupt, key, n)
		}
		item := binary.BigEndian.Uint32(b)
		b = b[4:]
		d, k := binary.Varint(b)
		if k <= 0 {
			return nil, fmt.Errorf("%w: session %q step %d", ErrCorrupt, key, n)
		}
		b = b[k:]
		e.steps = append(e.steps, models.Step{Item: item, TS: e.last - d})
	}
	return e, nil
}

// Load restores one session written by Flush. Call Loaded after the last.
func (t *Tracker) Load(key, val []byte) error {
	k := string(key[len(sessionPrefix):])
	e, err := decodeEntry(k, val)
	if err != nil {
		return err
	}
	s := t.shardFor(k)
	s.mu.Lock()
	defer s.mu.Unlock()
	s.m[k] = e
	return nil
}

// Loaded rebuilds each shard's LRU in the order of the stored touches, so a
// restarted tracker evicts exactly as the one before the restart would have.
func (t *Tracker) Loaded() {
	for i := range t.shards {
		s := &t.shards[i]
		s.mu.Lock()
		es := make([]*entry, 0, len(s.m))
		for _, e := range s.m {
			es = append(es, e)
		}
		sortByTouch(es)
		s.lru.next, s.lru.prev = &s.lru, &s.lru
		for _, e := range es { // ascending touch: the last pushed is the newest
			s.pushFrontLocked(e)
		}
		s.mu.Unlock()
	}
}

func sortByTouch(es []*entry) {
	slices.SortFunc(es, func(a, b *entry) int {
		switch {
		case a.touch < b.touch:
			return -1
		case a.touch > b.touch:
			return 1
		}
		return 0
	})
}
