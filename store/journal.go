package store

import (
	"bytes"
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"strconv"

	"github.com/dgraph-io/badger/v4"
)

// A flush that does not fit one Badger transaction (badger.ErrTxnTooBig:
// 15 % of the memtable in bytes, and that over a skiplist node's size in
// entries) is committed through a redo journal, so it stays atomic:
//
//  1. every write is copied under j/<n:u64>, in as many transactions as it
//     takes; the last one also writes x/journal (the entry count). That
//     commit is the flush's commit point.
//  2. the writes are applied to their own keys, again in several
//     transactions.
//  3. x/journal is deleted, then the j/ entries.
//
// Open finishes what a crash interrupted: with x/journal present it applies
// the journal again (every write is an absolute value or a delete, so
// applying it twice gives what applying it once gives) and clears it;
// without it, j/ entries are either a journal that never reached its commit
// point or the leftovers of one already applied, and are dropped. Between a
// crash and the next Open nothing else writes, so the state after Open is
// either the one before the flush or the one after it, checkpoint included.
var (
	journalPrefix = []byte("j/")
	journalKey    = []byte("x/journal")
)

func journalEntryKey(i int) []byte {
	return binary.BigEndian.AppendUint64(append([]byte(nil), journalPrefix...), uint64(i))
}

// encodeOp encodes a write as: 0 (set) or 1 (delete), uvarint key length,
// key, value.
func encodeOp(op batchOp) []byte {
	b := make([]byte, 0, 1+binary.MaxVarintLen32+len(op.key)+len(op.val))
	if op.del {
		b = append(b, 1)
	} else {
		b = append(b, 0)
	}
	b = binary.AppendUvarint(b, uint64(len(op.key)))
	b = append(b, op.key...)
	return append(b, op.val...)
}

func decodeOp(b []byte) (batchOp, error) {
	if len(b) < 2 || b[0] > 1 {
		return batchOp{}, fmt.Errorf("%w: journal entry of %d bytes", ErrCorrupt, len(b))
	}
	n, w := binary.Uvarint(b[1:])
	if w <= 0 || n > uint64(len(b)-1-w) {
		return batchOp{}, fmt.Errorf("%w: journal entry key length", ErrCorrupt)
	}
	k := b[1+w : 1+w+int(n)]
	op := batchOp{key: bytes.Clone(k), del: b[0] == 1}
	if !op.del {
		op.val = bytes.Clone(b[1+w+int(n):])
	}
	return op, nil
}

// chunkWriter writes through as many transactions as the writes need,
// committing one whenever the next write would make it too big.
type chunkWriter struct {
	s     *Store
	tx    *badger.Txn
	bytes int
	stage string // named to the test hook after each commit
}

func (s *Store) newChunkWriter(stage string) *chunkWriter {
	return &chunkWriter{s: s, tx: s.db.NewTransaction(true), stage: stage}
}

func (c *chunkWriter) write(key, val []byte, del bool) error {
	do := func() error {
		if del {
			return c.tx.Delete(key)
		}
		return c.tx.Set(key, val)
	}
	err := do()
	if errors.Is(err, badger.ErrTxnTooBig) {
		if err := c.commit(); err != nil {
			return err
		}
		err = do()
	}
	if err != nil {
		return fmt.Errorf("write %q: %w", key, err)
	}
	c.bytes += len(key) + len(val)
	return nil
}

// commit commits the open transaction and starts the next.
func (c *chunkWriter) commit() error {
	err := c.tx.Commit()
	c.tx.Discard()
	c.tx = c.s.db.NewTransaction(true)
	if err != nil {
		return fmt.Errorf("commit: %w", err)
	}
	c.s.metrics.commits.Inc()
	c.s.metrics.commitBytes.Add(float64(c.bytes))
	c.bytes = 0
	return c.s.hook(c.stage)
}

func (c *chunkWriter) discard() { c.tx.Discard() }

// commitJournaled commits b through the journal (see above).
func (s *Store) commitJournaled(b *Batch) error {
	s.metrics.journaled.Inc()
	if err := s.writeJournal(b); err != nil {
		// Before the commit point nothing of the flush counts: drop
		// what was written, so the next journal starts clean.
		// (Had the marker's commit gone through, recoverJournal
		// applies the flush instead, and the error still stops the
		// writer, whose restart finds the flush applied.)
		if cerr := s.recoverJournal(context.Background()); cerr != nil {
			s.log.Warn("store: clearing a failed journal", "err", cerr)
		}
		return fmt.Errorf("journal: %w", err)
	}
	// From here on the flush is committed: a failure below leaves a
	// complete journal that the next Open applies.
	if err := s.applyJournal(b.ops); err != nil {
		return fmt.Errorf("apply journal (the flush is committed; the next Open completes it): %w", err)
	}
	return nil
}

// writeJournal writes b's journal and its marker, the commit point.
func (s *Store) writeJournal(b *Batch) error {
	w := s.newChunkWriter("journal")
	defer func() { w.discard() }()
	for i, op := range b.ops {
		if err := w.write(journalEntryKey(i), encodeOp(op), false); err != nil {
			return err
		}
	}
	if err := w.write(journalKey, []byte(strconv.Itoa(len(b.ops))), false); err != nil {
		return err
	}
	w.stage = "journaled"
	return w.commit()
}

// applyJournal writes ops to their keys, then clears the journal of n
// entries: its marker first, so a crash in the middle of clearing leaves
// entries without a marker, which Open drops.
func (s *Store) applyJournal(ops []batchOp) error {
	w := s.newChunkWriter("apply")
	defer func() { w.discard() }()
	for _, op := range ops {
		if err := w.write(op.key, op.val, op.del); err != nil {
			return err
		}
	}
	w.stage = "applied"
	if err := w.commit(); err != nil {
		return err
	}
	w.stage = "unmarked"
	if err := w.write(journalKey, nil, true); err != nil {
		return err
	}
	if err := w.commit(); err != nil {
		return err
	}
	w.stage = "clear"
	for i := range ops {
		if err := w.write(journalEntryKey(i), nil, true); err != nil {
			return err
		}
	}
	w.stage = "cleared"
	return w.commit()
}

// recoverJournal finishes or drops a journal a crash left behind.
func (s *Store) recoverJournal(ctx context.Context) error {
	mark, err := s.Get(journalKey)
	if errors.Is(err, ErrNotFound) {
		var stale [][]byte
		err := s.Scan(ctx, journalPrefix, func(key, _ []byte) error {
			stale = append(stale, bytes.Clone(key))
			return nil
		})
		if err != nil || len(stale) == 0 {
			return err
		}
		s.log.Warn("store: dropping an uncommitted or already applied flush journal", "entries", len(stale))
		w := s.newChunkWriter("clear")
		defer func() { w.discard() }()
		for _, k := range stale {
			if err := w.write(k, nil, true); err != nil {
				return err
			}
		}
		return w.commit()
	}
	if err != nil {
		return err
	}
	n, err := strconv.Atoi(string(mark))
	if err != nil || n < 0 {
		return fmt.Errorf("%w: journal marker %q", ErrCorrupt, mark)
	}
	ops := make([]batchOp, 0, n)
	err = s.Scan(ctx, journalPrefix, func(key, val []byte) error {
		if len(ops) == n {
			return nil // leftovers of an older, longer journal: cleared below
		}
		if len(key) != len(journalPrefix)+8 || binary.BigEndian.Uint64(key[len(journalPrefix):]) != uint64(len(ops)) {
			return fmt.Errorf("%w: journal key %x after %d entries", ErrCorrupt, key, len(ops))
		}
		op, err := decodeOp(val)
		if err != nil {
			return err
		}
		ops = append(ops, op)
		return nil
	})
	if err != nil {
		return fmt.Errorf("read journal: %w", err)
	}
	if len(ops) != n {
		return fmt.Errorf("%w: journal holds %d of %d entries", ErrCorrupt, len(ops), n)
	}
	s.log.Warn("store: completing a flush interrupted after its commit", "entries", n)
	if err := s.applyJournal(ops); err != nil {
		return fmt.Errorf("apply journal: %w", err)
	}
	return nil
}
