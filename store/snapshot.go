package store

import (
	"context"
	"errors"
	"fmt"
	"io"
)

// ErrNotEmpty reports a restore into a store that already holds state.
var ErrNotEmpty = errors.New("store: not empty")

// Backup writes a full snapshot of the store to w. The caller must keep
// flushes out while it runs, so the snapshot holds exactly the state its
// checkpoint describes.
func (s *Store) Backup(w io.Writer) error {
	if _, err := s.db.Backup(w, 0); err != nil {
		return fmt.Errorf("backup: %w", err)
	}
	return nil
}

// Restore loads a snapshot written by Backup into an empty store. The
// snapshot's replica identity is dropped: the restored store is a new
// replica with a durable consumer of its own.
func (s *Store) Restore(ctx context.Context, r io.Reader) (err error) {
	defer func() {
		// Badger's Load panics on some malformed input ("slice bounds
		// out of range"); a bad snapshot is an error, never a crash.
		if p := recover(); p != nil {
			err = fmt.Errorf("%w: snapshot: %v", ErrCorrupt, firstLine(fmt.Sprint(p)))
		}
	}()
	empty := true
	err = s.Scan(ctx, nil, func(key, _ []byte) error {
		empty = false
		return errStop
	})
	if err != nil && !errors.Is(err, errStop) {
		return err
	}
	if !empty {
		return ErrNotEmpty
	}
	if err := s.db.Load(r, 256); err != nil {
		return fmt.Errorf("%w: restore: %v", ErrCorrupt, err)
	}
	return s.Commit(func(tx *Txn) error { return tx.Delete(replicaKey) })
}

var errStop = errors.New("stop")
