package store

import (
	"fmt"
	"strconv"
	"strings"
)

// DefaultMemoryBudget is serve's default memory budget: a sidecar's usual
// limit (common practice: 1 GiB containers for a small service).
const DefaultMemoryBudget = 1 << 30

// MinMemoryBudget is the smallest budget [SizeFor] accepts: its 8 MiB
// memtable is the smallest whose transaction limit (15 %) still holds one
// value at Badger's value threshold (1 MiB), which Badger requires.
const MinMemoryBudget = 256 << 20

// Sizing is how one process memory budget is split between Badger's parts
// and the Go heap. Badger's defaults (five 64 MiB memtables at 1.3 times
// their size, a 256 MiB block cache, a 2 GiB value-log mapping) and the
// collector's default headroom (the heap may double before a collection)
// took serve to 2.1 GiB of RSS on the state-memory load; the split below
// keeps it under the budget (deploy/SCALING.md has the measurements).
//
// Resident memory has two kinds of pages. The Go heap (learned state,
// Badger's memtable arenas, its table builders and caches, the embedded
// NATS server, HTTP buffers) is held under GoMemLimit by the collector.
// Badger's files are memory-mapped: the write-ahead log of each memtable
// and every table it writes stay resident until the kernel needs the
// pages back, and count in RSS. Mapped is the budget's share left for them.
type Sizing struct {
	// Budget is the whole process's memory budget in bytes.
	Budget int64
	// MemTableSize is one Badger memtable. Its arena takes 1.3 times this
	// (room for one transaction of 15 % on top), its log as much again in
	// mapped pages, and a transaction may hold 15 % of it.
	MemTableSize int64
	// NumMemtables is how many memtables may be in memory: one taking
	// writes and one being written to a table.
	NumMemtables int
	// NumLevelZeroTables is how many memtable-sized tables may wait at
	// level 0 before compaction merges them (each holds every version
	// written, and stays mapped).
	NumLevelZeroTables int
	// NumCompactors runs compactions side by side, each building tables
	// in memory.
	NumCompactors int
	// BlockCacheSize holds decompressed table blocks. waymark reads the
	// store only at start and for snapshots, so a small cache suffices.
	BlockCacheSize int64
	// IndexCacheSize holds table indexes; 0 would keep every table's
	// index in memory, without a bound.
	IndexCacheSize int64
	// ValueLogFileSize bounds one value-log file. Badger maps (and
	// reserves on disk) twice this for each; waymark's values stay under
	// the value threshold, so the log holds almost nothing.
	ValueLogFileSize int64
	// GoMemLimit is the soft limit for the Go runtime
	// (runtime/debug.SetMemoryLimit): the budget less Mapped.
	GoMemLimit int64
	// Mapped is the budget's share for memory-mapped store files.
	Mapped int64
}

// arenaFactor is a memtable arena over its MemTableSize: Badger adds
// room for one largest batch (15 %) and its skiplist nodes (about 15 %).
const arenaFactor = 1.3

// SizeFor splits budget bytes. MemTableSize is a thirty-second of the
// budget (32 MiB at 1 GiB) up to 256 MiB: a memtable costs about five times
// its size at its peak (its arena, the next one's, and the table built from
// it, whose blocks and their compressed copies Badger keeps in memory
// until the table is written), and flushes on the state-memory load
// average 2.7 MB, so 32 MiB still holds about ten of them. The mapped
// share is what the memtables' logs and the level-0 tables may hold at
// once, plus a quarter of the budget for the compacted tables; the Go heap
// gets the rest.
func SizeFor(budget int64) (Sizing, error) {
	if budget < MinMemoryBudget {
		return Sizing{}, fmt.Errorf("store: memory budget %s below the minimum %s", FormatBytes(budget), FormatBytes(MinMemoryBudget))
	}
	s := Sizing{
		Budget:             budget,
		MemTableSize:       min(budget/32, 256<<20),
		NumMemtables:       2,
		NumLevelZeroTables: 2,
		NumCompactors:      2,
		BlockCacheSize:     budget / 32,
		IndexCacheSize:     budget / 64,
		ValueLogFileSize:   min(budget/16, 1<<30-1),
	}
	s.resolve()
	return s, nil
}

// resolve sets the shares that follow from MemTableSize.
func (s *Sizing) resolve() {
	logs := int64(float64(s.NumMemtables) * arenaFactor * float64(s.MemTableSize))
	l0 := int64(s.NumLevelZeroTables) * s.MemTableSize
	s.Mapped = logs + l0 + s.Budget/4
	s.GoMemLimit = s.Budget - s.Mapped
}

// Sizing returns the split o asks for: the memory budget's, with an
// explicit MemTableSize (the deprecated serve flag) in place of the
// budget's own.
func (o Options) Sizing() (Sizing, error) {
	b := o.MemoryBudget
	if b == 0 {
		b = DefaultMemoryBudget
	}
	s, err := SizeFor(b)
	if err != nil {
		return s, err
	}
	if o.MemTableSize != 0 {
		if o.MemTableSize < 1<<20 {
			return s, fmt.Errorf("store: MemTableSize %d below 1 MiB", o.MemTableSize)
		}
		s.MemTableSize = o.MemTableSize
		s.resolve()
		if s.GoMemLimit < s.Budget/4 {
			return s, fmt.Errorf("store: MemTableSize %s leaves the Go heap %s of the %s memory budget; raise the budget",
				FormatBytes(o.MemTableSize), FormatBytes(s.GoMemLimit), FormatBytes(s.Budget))
		}
	}
	return s, nil
}

// ParseBytes reads a size such as "1GiB", "512MiB", "2G", "900M" or a
// plain number of bytes. K, M, G and T are powers of 1024, as in
// GOMEMLIMIT and Kubernetes' Mi and Gi; "B", "iB" and "i" suffixes are
// optional.
func ParseBytes(s string) (int64, error) {
	t := strings.TrimSpace(s)
	u := strings.ToUpper(t)
	u = strings.TrimSuffix(u, "B")
	u = strings.TrimSuffix(u, "I")
	mult := int64(1)
	if n := len(u); n > 0 {
		switch u[n-1] {
		case 'K':
			mult = 1 << 10
		case 'M':
			mult = 1 << 20
		case 'G':
			mult = 1 << 30
		case 'T':
			mult = 1 << 40
		}
		if mult > 1 {
			u = u[:n-1]
		}
	}
	n, err := strconv.ParseInt(strings.TrimSpace(u), 10, 64)
	if err != nil || n < 0 || n > (1<<62)/mult {
		return 0, fmt.Errorf("store: size %q: want a number of bytes with an optional unit, e.g. 1GiB or 512MiB", s)
	}
	return n * mult, nil
}

// FormatBytes writes n in the largest binary unit that divides it, so
// ParseBytes reads it back: 1GiB, 1536MiB, 1000B.
func FormatBytes(n int64) string {
	for _, u := range []struct {
		s string
		v int64
	}{{"TiB", 1 << 40}, {"GiB", 1 << 30}, {"MiB", 1 << 20}, {"KiB", 1 << 10}} {
		if n != 0 && n%u.v == 0 {
			return strconv.FormatInt(n/u.v, 10) + u.s
		}
	}
	return strconv.FormatInt(n, 10) + "B"
}
