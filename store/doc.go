// Package store keeps waymark's learned state in an embedded Badger
// database.
//
// # Usage
//
//	st, err := store.Open(ctx, dir, store.DefaultOptions())
//	...
//	err = st.Commit(func(tx *store.Txn) error {
//		// write the changed counts ...
//		return tx.PutCheckpoint(cp) // ... and the stream position, atomically
//	})
//
// # Durability
//
// Every flush of the learners is one atomic commit (one Badger transaction,
// or a redo journal over several when it exceeds a transaction's limits:
// journal.go) holding the changed counts, the session windows, new
// dictionary entries and the [Checkpoint]:
// the last applied stream sequence and the exact event counters. The bus is
// acknowledged only after that commit, and on start the consumer resumes
// after the stored sequence, so a crash at any moment loses nothing and
// counts nothing twice. Writes are not fsynced by default: a killed process
// loses nothing (the operating system still holds the pages), a power cut may
// lose the last flushes, which the stream then replays. Options.SyncWrites
// closes that gap at a cost in ingest rate.
//
// # Key layout
//
// The store knows bytes, not model semantics; FORMAT.md beside this file
// documents every prefix.
package store
