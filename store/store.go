package store

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"strings"
	"syscall"
	"time"

	"github.com/dgraph-io/badger/v4"
	"github.com/dgraph-io/badger/v4/options"
	"github.com/dgraph-io/badger/v4/y"
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

	// hook, when set (tests only), is called after each transaction of a
	// multi-transaction flush with the stage it finished.
	hook func(stage string) error
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
	db       *badger.DB
	log      *slog.Logger
	metrics  *metrics
	hookFn   func(stage string) error
	dir      string // "" in memory
	memtable int64
}

func (s *Store) hook(stage string) error {
	if s.hookFn != nil {
		return s.hookFn(stage)
	}
	return nil
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
	// Every table's checksums are verified before Badger opens it
	// (verify.go), every block's and value's when read: damage on disk is
	// found at start, not served as state (issue 12). Verifying at open
	// reads each table once more, about what loading the state reads.
	bo = bo.WithChecksumVerificationMode(options.OnBlockRead).WithVerifyValueChecksum(true)
	if !opts.InMemory {
		if err := verifyTables(dir, bo); err != nil {
			return nil, fmt.Errorf("open store %s: %w", dir, err)
		}
	}
	db, err := openBadger(bo)
	if err != nil {
		return nil, fmt.Errorf("open store %s: %w", dir, err)
	}
	s := &Store{db: db, log: opts.Logger, metrics: newMetrics(), hookFn: opts.hook, memtable: opts.MemTableSize}
	if !opts.InMemory {
		s.dir = dir
	}
	if err := s.recoverJournal(ctx); err != nil {
		db.Close()
		return nil, fmt.Errorf("open store %s: %w", dir, err)
	}
	// Registered only once the store opened, so a caller may try again.
	s.metrics.register(opts.Registerer, s)
	return s, nil
}

// openBadger opens the database, turning a panic of Badger's on damaged
// files (it panics on some truncated tables) and its checksum and
// manifest errors into ErrCorrupt.
func openBadger(bo badger.Options) (db *badger.DB, err error) {
	defer func() {
		if p := recover(); p != nil {
			db, err = nil, fmt.Errorf("%w: %v", ErrCorrupt, firstLine(fmt.Sprint(p)))
		}
	}()
	db, err = badger.Open(bo)
	if err != nil && isDamage(err) {
		return nil, fmt.Errorf("%w: %s", ErrCorrupt, firstLine(err.Error()))
	}
	return db, err
}

// isDamage tells errors of damaged files from others (a held lock, a
// missing permission), which must not be taken for corruption: damage may
// lead to discarding the store.
func isDamage(err error) bool {
	if errors.Is(err, y.ErrChecksumMismatch) || errors.Is(err, badger.ErrTruncateNeeded) {
		return true
	}
	msg := strings.ToLower(err.Error())
	for _, w := range []string{"checksum", "corrupt", "truncat", "unexpected eof", "invalid table", "bad magic", "out of range", "failed to decode"} {
		if strings.Contains(msg, w) {
			return true
		}
	}
	return false
}

func firstLine(s string) string {
	if i := strings.IndexByte(s, '\n'); i >= 0 {
		return s[:i]
	}
	return s
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
func (s *Store) Scan(ctx context.Context, prefix []byte, f func(key, val []byte) error) (err error) {
	defer func() {
		// Badger panics on some damaged blocks; a damaged store is an
		// error, never a crash.
		if p := recover(); p != nil {
			err = fmt.Errorf("%w: scan %q: %v", ErrCorrupt, prefix, firstLine(fmt.Sprint(p)))
		}
	}()
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
			if err != nil && !errors.Is(err, ErrCorrupt) && isDamage(err) {
				err = fmt.Errorf("%w: %v", ErrCorrupt, err)
			}
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

// Wipe deletes every key: the learned state, the checkpoint and the
// replica identity. The store stays open.
func (s *Store) Wipe() error {
	if err := s.db.DropAll(); err != nil {
		return fmt.Errorf("wipe store: %w", err)
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

// entryOverhead approximates what Badger adds to each write when it sizes
// a transaction (version, meta, header): a batch is journaled up front when
// its own estimate already passes a limit, which spares building a
// transaction only to have it refused.
const entryOverhead = 32

// spaceMargin is the free space kept beyond what a commit needs: Badger
// writes through memory-mapped files, and a write into a mapped page the
// full disk cannot back kills the process with SIGBUS instead of returning
// an error, so the store must not start a write the disk cannot hold.
const spaceMargin = 64 << 20

// CheckSpace returns an error wrapping syscall.ENOSPC when the store's
// disk has less free space than committing b needs: twice its bytes (a
// journaled flush writes them twice), a memtable (the table it may flush
// to) and a margin.
func (s *Store) CheckSpace(b *Batch) error {
	if s.dir == "" {
		return nil
	}
	var fs syscall.Statfs_t
	if err := syscall.Statfs(s.dir, &fs); err != nil {
		return nil // unknown: let the write tell
	}
	free := int64(fs.Bavail) * int64(fs.Bsize)
	need := 2*int64(b.Bytes()+entryOverhead*b.Len()) + s.memtable + spaceMargin
	if free < need {
		return fmt.Errorf("store: %d bytes free on the store's disk, a commit needs %d: %w", free, need, syscall.ENOSPC)
	}
	return nil
}

// CommitBatch writes b atomically: in one transaction when it fits
// Badger's limits, else through the journal (journal.go), so no flush is
// ever too large to commit.
func (s *Store) CommitBatch(b *Batch) error {
	if int64(b.Len()+1) >= s.db.MaxBatchCount() || int64(b.Bytes()+entryOverhead*b.Len()) >= s.db.MaxBatchSize() {
		return s.commitJournaled(b)
	}
	err := s.commitOne(b)
	if errors.Is(err, ErrTooLarge) {
		return s.commitJournaled(b)
	}
	return err
}

func (s *Store) commitOne(b *Batch) error {
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
