package models

// ItemID is an item's dense id from the pipeline's dictionary.
type ItemID = uint32

// Step is one click of a session window.
type Step struct {
	Item ItemID
	TS   int64 // event time, unix milliseconds
}

// Observation is one click as a learner sees it: the session's window before
// the click and the click itself.
type Observation struct {
	// Window holds the session's recent clicks before this one, oldest
	// first, with consecutive repeats of the same item collapsed. It is
	// owned by the caller and only valid during Observe.
	Window []Step
	Item   ItemID
	TS     int64
	Kind   uint8
	// SessionNo numbers session instances in the order they started; a
	// visitor who returns after the inactivity timeout gets a new number.
	SessionNo uint64
	// SessionHash is a 64-bit hash of the session's id (HashSession), so
	// a model that keeps past sessions can forget a visitor on request
	// without storing the id itself.
	SessionHash uint64
	// Repeat is true when Item equals the last item of Window; transition
	// statistics skip such clicks (common practice).
	Repeat bool
	// Weight is the landmark decay weight of TS (see the package doc).
	Weight float64
}

// Query asks for next items of a session.
type Query struct {
	// Session is the session's clicks, oldest first, consecutive repeats
	// collapsed. Unknown items are absent; Unknown counts them.
	Session []Step
	Unknown int
	// Now is the event time the query is answered at.
	Now int64
	// SessionNo identifies a tracked session (0 for a sequence sent by the
	// caller), so session-based models can skip the session itself.
	SessionNo uint64
}

// Last returns the session's last item and whether there is one.
func (q *Query) Last() (ItemID, bool) {
	if len(q.Session) == 0 {
		return 0, false
	}
	return q.Session[len(q.Session)-1].Item, true
}

// Model is one next-item method.
type Model interface {
	// Name is the model's spec, for example "sr(window=5)".
	Name() string
	// Observe learns one click. Calls come from one goroutine.
	Observe(o *Observation)
	// Candidates adds the model's candidates for q and their raw scores
	// to out. Raw scores are comparable within one call only.
	Candidates(q *Query, out *Scores)
	// ScoreItems writes the model's raw score of each item in items
	// into out (0 when it has none), for callers that bring their own
	// candidates.
	ScoreItems(q *Query, items []ItemID, out []float64)
}

// KV receives the writes of a flush. In serve it is one Badger transaction.
type KV interface {
	Set(key, val []byte) error
	Delete(key []byte) error
}

// Persistent is a model whose state survives a restart.
type Persistent interface {
	// SetPrefix sets the unique key prefix under which the model stores
	// its entries. It is called once, before Load or Flush.
	SetPrefix(prefix string)
	// Prefix returns the key prefix set by SetPrefix.
	Prefix() string
	// Flush writes every entry changed since the last Flush.
	Flush(kv KV) error
	// Load restores one entry previously written by Flush. Keys arrive
	// with the prefix still on, in key order.
	Load(key, val []byte) error
}

// ItemBounded is a Persistent model that checks the item ids it loads, so
// a damaged entry cannot make it grow toward four billion ids.
type ItemBounded interface {
	// LoadBound makes Load refuse an item id at or above n with
	// ErrCorrupt (0: no bound). It is called before Load.
	LoadBound(n int)
	// LoadedItems returns one more than the largest item id Load met, for
	// the caller to check against the dictionary.
	LoadedItems() int
}

// ItemInfo is a catalogue record as models see it.
type ItemInfo struct {
	Item ItemID
	// Attrs holds the record's attributes: category path, tags, title or
	// description words, any string attribute.
	Attrs map[string][]string
	// Vector is an optional dense embedding computed elsewhere.
	Vector []float32
	// Available is false for an item that must not be recommended.
	Available bool
	// Published is the item's publication time (unix ms), 0 if unknown.
	Published int64
	// TS is the event time the record was applied at.
	TS int64
}

// CatalogLearner is a model that learns from catalogue records too.
type CatalogLearner interface {
	ObserveItem(info *ItemInfo)
}

// HashSession returns the FNV-1a 64-bit hash of a session id.
func HashSession(id string) uint64 {
	h := uint64(14695981039346656037)
	for i := 0; i < len(id); i++ {
		h ^= uint64(id[i])
		h *= 1099511628211
	}
	return h
}

// Forgetter is a model that keeps per-session data and can delete a
// visitor's sessions, identified by HashSession of their id.
type Forgetter interface {
	ForgetSession(hash uint64)
}

// ExposureLearner is a model that learns what responses showed: Served
// records one response's items for tracked session sessionNo (0 for a
// sequence sent by the caller) at event time ts.
type ExposureLearner interface {
	Served(sessionNo uint64, items []ItemID, ts int64)
}

// DirtySizer is a persistent model that can estimate how many bytes its
// next Flush writes, so the caller flushes before a flush outgrows one
// store transaction.
type DirtySizer interface {
	DirtyBytes() int
}
