package models

// Scores holds one query's candidate items and their scores. It is an
// open-addressing hash table (linear probing, Fibonacci hashing of the
// dense item id) over a slice of entries in first-insertion order, so
// gathering a few hundred candidates costs a few nanoseconds each instead
// of a Go map's hashing, growth and iteration, and walking the candidates
// is a slice walk. A zero Scores is ready to use; Reset empties it for the
// next query without giving its memory back.
//
// A model whose candidates are distinct (one row's entries) appends them
// with [Scores.Append] instead of adding: the table then indexes them only
// if someone looks one up, so a blend's per-signal tables, which are only
// walked, cost a slice append per candidate.
type Scores struct {
	ents    []Scored // candidates in first-insertion order
	slots   []int32  // index+1 into ents, 0 when empty; len is a power of two
	shift   uint8    // 32 - log2(len(slots))
	indexed int      // ents[:indexed] are in slots; the rest were appended
}

// scoresMinSlots is the table size of a fresh Scores: room for a typical
// neighbour row (a few hundred candidates) without growing.
const scoresMinSlots = 1024

// NewScores returns an empty Scores sized for about n candidates.
func NewScores(n int) *Scores {
	s := new(Scores)
	s.init(n)
	return s
}

func (s *Scores) init(n int) {
	size := scoresMinSlots
	for size < 2*n {
		size *= 2
	}
	s.slots = make([]int32, size)
	s.shift = uint8(32 - log2(size))
	if cap(s.ents) < n {
		s.ents = make([]Scored, 0, n)
	}
}

func log2(n int) int {
	l := 0
	for n > 1 {
		n >>= 1
		l++
	}
	return l
}

// find returns the slot of id: the slot holding it, or the empty slot
// where it would go.
func (s *Scores) find(id ItemID) int {
	mask := len(s.slots) - 1
	i := int((uint32(id) * 0x9E3779B1) >> s.shift)
	for {
		e := s.slots[i]
		if e == 0 || s.ents[e-1].Item == id {
			return i
		}
		i = (i + 1) & mask
	}
}

// Append adds id with score v, which the caller knows is absent: it
// costs no lookup until one is made. Appending an id already present
// breaks the table.
func (s *Scores) Append(id ItemID, v float64) {
	s.ents = append(s.ents, Scored{id, v})
}

// index brings the appended entries into the hash table.
func (s *Scores) index() {
	if s.slots == nil {
		s.init(0)
	}
	for ; s.indexed < len(s.ents); s.indexed++ {
		if 2*(s.indexed+1) > len(s.slots) {
			s.grow()
		}
		s.slots[s.find(s.ents[s.indexed].Item)] = int32(s.indexed + 1)
	}
}

// Add adds v to id's score, inserting id with score v if absent.
func (s *Scores) Add(id ItemID, v float64) {
	if s.indexed < len(s.ents) || s.slots == nil {
		s.index()
	}
	i := s.find(id)
	if e := s.slots[i]; e != 0 {
		s.ents[e-1].Score += v
		return
	}
	s.insert(i, id, v)
}

// Set sets id's score to v.
func (s *Scores) Set(id ItemID, v float64) {
	if s.indexed < len(s.ents) || s.slots == nil {
		s.index()
	}
	i := s.find(id)
	if e := s.slots[i]; e != 0 {
		s.ents[e-1].Score = v
		return
	}
	s.insert(i, id, v)
}

func (s *Scores) insert(slot int, id ItemID, v float64) {
	s.ents = append(s.ents, Scored{id, v})
	s.slots[slot] = int32(len(s.ents))
	s.indexed = len(s.ents)
	if 2*len(s.ents) > len(s.slots) { // keep the load at most one half
		s.grow()
	}
}

// grow doubles the table and re-indexes the indexed entries.
func (s *Scores) grow() {
	size := 2 * len(s.slots)
	s.slots = make([]int32, size)
	s.shift = uint8(32 - log2(size))
	for j, e := range s.ents[:s.indexed] {
		s.slots[s.find(e.Item)] = int32(j + 1)
	}
}

// Get returns id's score, 0 when absent.
func (s *Scores) Get(id ItemID) float64 {
	v, _ := s.Lookup(id)
	return v
}

// Lookup returns id's score and whether id is present.
func (s *Scores) Lookup(id ItemID) (float64, bool) {
	if len(s.ents) == 0 {
		return 0, false
	}
	if s.indexed < len(s.ents) {
		s.index()
	}
	if e := s.slots[s.find(id)]; e != 0 {
		return s.ents[e-1].Score, true
	}
	return 0, false
}

// Len returns the number of candidates.
func (s *Scores) Len() int { return len(s.ents) }

// Entries returns the candidates in first-insertion order. The caller may
// change scores in place but must not keep the slice past the next Add,
// Set or Reset.
func (s *Scores) Entries() []Scored { return s.ents }

// Max returns the highest score, 0 when there is none above 0.
func (s *Scores) Max() float64 {
	mx := 0.0
	for _, e := range s.ents {
		mx = max(mx, e.Score)
	}
	return mx
}

// Reset empties s, keeping its memory. Clearing only the used slots keeps
// the cost proportional to the candidates, not to a table an earlier big
// query grew. They are cleared newest first: every slot on an entry's probe
// path holds an older entry, so the path is intact when it is cleared.
func (s *Scores) Reset() {
	if s.indexed*8 < len(s.slots) {
		for j := s.indexed - 1; j >= 0; j-- {
			s.slots[s.find(s.ents[j].Item)] = 0
		}
	} else {
		clear(s.slots)
	}
	s.ents = s.ents[:0]
	s.indexed = 0
}

// Indexed reports whether every entry is in the hash table, so a lookup
// costs nothing extra.
func (s *Scores) Indexed() bool { return s.indexed == len(s.ents) }
