package store

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"time"

	"github.com/dgraph-io/badger/v4"
	"github.com/prometheus/client_golang/prometheus"
)

// Options configures [Open].
type Options struct {
	// MemoryBudget is the whole process's memory budget in bytes (default
	// 1 GiB); [SizeFor] splits it between Badger's memtables, caches and
	// mapped files and the Go heap.
	MemoryBudget int64
	// MemTableSize, when set, overrides the budget's memtable size, which
	// bounds the largest flush that fits one transaction (about 15 % of
	// it). Deprecated: set MemoryBudget.
	MemTableSize int64
	// SyncWrites fsyncs every commit (see the package doc).
	SyncWrites bool
	// InMemory keeps everything in memory (tests and replay only).
	InMemory   bool
	Logger     *slog.Logger
	Registerer prometheus.Registerer
}

// DefaultOptions returns the options serve uses.
func DefaultOptions() Options {
	return Options{MemoryBudget: DefaultMemoryBudget}
}

func (o *Options) validate() (Sizing, error) {
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
	return o.Sizing()
}

// Store is waymark's Badger database.
type Store struct {
	db      *badger.DB
	dir     string // "" in memory
	log     *slog.Logger
	metrics *metrics
}

// Open opens or creates the store in dir.
func Open(ctx context.Context, dir string, opts Options) (*Store, error) {
	sz, err := opts.validate()
	if err != nil {
		return nil, err
	}
	bo := badger.DefaultOptions(dir).
		WithLogger(badgerLogger{opts.Logger}).
		WithMemTableSize(sz.MemTableSize).
		WithNumMemtables(sz.NumMemtables).
		WithNumLevelZeroTables(sz.NumLevelZeroTables).
		WithNumCompactors(sz.NumCompactors).
		WithBlockCacheSize(sz.BlockCacheSize).
		WithIndexCacheSize(sz.IndexCacheSize).
		WithValueLogFileSize(sz.ValueLogFileSize).
		WithSyncWrites(opts.SyncWrites).
		WithNumVersionsToKeep(1).
		WithDetectConflicts(false)
	if opts.InMemory {
		bo = bo.WithDir("").WithValueDir("").WithInMemory(true)
	}
	db, err := badger.Open(bo)
	if err != nil {
		return nil, fmt.Errorf("open store %s: %w", dir, err)
	}
	s := &Store{db: db, log: opts.Logger}
	if !opts.InMemory {
		s.dir = dir
	}
	s.metrics = newMetrics(opts.Registerer, s)
	return s, nil
}

// Close closes the database.
func (s *Store) Close() error {
	if err := s.db.Close(); err != nil {
		return fmt.Errorf("close store: %w", err)
	}
	return nil
}

// DB exposes the Badger handle for snapshots.
func (s *Store) DB() *badger.DB { return s.db }

// Txn is one write transaction.
type Txn struct {
	tx    *badger.Txn
	bytes int
}

// Set writes key=val. The slices must not change until the commit.
func (t *Txn) Set(key, val []byte) error {
	t.bytes += len(key) + len(val)
	if err := t.tx.Set(key, val); err != nil {
		if errors.Is(err, badger.ErrTxnTooBig) {
			return fmt.Errorf("%w (%d bytes so far)", ErrTooLarge, t.bytes)
		}
		return fmt.Errorf("set %q: %w", key, err)
	}
	return nil
}

// Delete removes key.
func (t *Txn) Delete(key []byte) error {
	if err := t.tx.Delete(key); err != nil {
		if errors.Is(err, badger.ErrTxnTooBig) {
			return fmt.Errorf("%w (%d bytes so far)", ErrTooLarge, t.bytes)
		}
		return fmt.Errorf("delete %q: %w", key, err)
	}
	return nil
}

// Commit runs f in one write transaction and commits it when f returns nil.
func (s *Store) Commit(f func(tx *Txn) error) error {
	start := time.Now()
	tx := s.db.NewTransaction(true)
	defer tx.Discard()
	t := &Txn{tx: tx}
	if err := f(t); err != nil {
		return err
	}
	if err := tx.Commit(); err != nil {
		return fmt.Errorf("commit: %w", err)
	}
	s.metrics.commits.Inc()
	s.metrics.commitBytes.Add(float64(t.bytes))
	s.metrics.commitSeconds.Observe(time.Since(start).Seconds())
	return nil
}

// Get returns a copy of the value of key, or ErrNotFound.
func (s *Store) Get(key []byte) ([]byte, error) {
	var out []byte
	err := s.db.View(func(tx *badger.Txn) error {
		it, err := tx.Get(key)
		if err != nil {
			return err
		}
		out, err = it.ValueCopy(nil)
		return err
	})
	if errors.Is(err, badger.ErrKeyNotFound) {
		return nil, ErrNotFound
	}
	if err != nil {
		return nil, fmt.Errorf("get %q: %w", key, err)
	}
	return out, nil
}

// Scan calls f for every key under prefix, in key order. The slices are
// only valid during the call.
func (s *Store) Scan(ctx context.Context, prefix []byte, f func(key, val []byte) error) error {
	return s.db.View(func(tx *badger.Txn) error {
		opts := badger.DefaultIteratorOptions
		opts.Prefix = prefix
		opts.PrefetchSize = 256
		it := tx.NewIterator(opts)
		defer it.Close()
		n := 0
		for it.Seek(prefix); it.ValidForPrefix(prefix); it.Next() {
			if n++; n%4096 == 0 && ctx.Err() != nil {
				return ctx.Err()
			}
			item := it.Item()
			err := item.Value(func(val []byte) error { return f(item.Key(), val) })
			if err != nil {
				return fmt.Errorf("scan %q: %w", item.Key(), err)
			}
		}
		return nil
	})
}

// DropPrefix deletes every key under prefix.
func (s *Store) DropPrefix(prefix []byte) error {
	if err := s.db.DropPrefix(prefix); err != nil {
		return fmt.Errorf("drop %q: %w", prefix, err)
	}
	return nil
}

// Size returns the bytes the store's folder takes on disk: the blocks
// allocated to its files, as du counts them. Badger's own DB.Size counts
// the value log at its reserved length (twice ValueLogFileSize, 2 GiB at
// its default, for a log that holds almost nothing) and is refreshed only
// once a minute.
func (s *Store) Size() int64 {
	if s.dir == "" {
		lsm, vlog := s.db.Size()
		return lsm + vlog
	}
	n, err := diskUsage(s.dir)
	if err != nil {
		s.log.Debug("store size", "err", err)
	}
	return n
}

type badgerLogger struct{ l *slog.Logger }

func (b badgerLogger) Errorf(f string, a ...any) {
	b.l.Error(fmt.Sprintf(f, a...), "component", "badger")
}
func (b badgerLogger) Warningf(f string, a ...any) {
	b.l.Warn(fmt.Sprintf(f, a...), "component", "badger")
}
func (b badgerLogger) Infof(f string, a ...any) {
	b.l.Debug(fmt.Sprintf(f, a...), "component", "badger")
}
func (b badgerLogger) Debugf(f string, a ...any) {}

// Batch collects writes in memory to commit later in one transaction, so
// the owner of the data can encode a flush quickly and go on working while
// the commit runs.
type Batch struct {
	ops   []batchOp
	bytes int
}

type batchOp struct {
	key, val []byte
	del      bool
}

// Set records key=val. The slices must not change until the commit.
func (b *Batch) Set(key, val []byte) error {
	b.ops = append(b.ops, batchOp{key: key, val: val})
	b.bytes += len(key) + len(val)
	return nil
}

// Delete records the removal of key.
func (b *Batch) Delete(key []byte) error {
	b.ops = append(b.ops, batchOp{key: key, del: true})
	b.bytes += len(key)
	return nil
}

// Len returns the number of writes recorded.
func (b *Batch) Len() int { return len(b.ops) }

// Bytes returns the key and value bytes recorded.
func (b *Batch) Bytes() int { return b.bytes }

// CommitBatch writes b in one transaction.
func (s *Store) CommitBatch(b *Batch) error {
	return s.Commit(func(tx *Txn) error {
		for _, op := range b.ops {
			var err error
			if op.del {
				err = tx.Delete(op.key)
			} else {
				err = tx.Set(op.key, op.val)
			}
			if err != nil {
				return err
			}
		}
		return nil
	})
}
