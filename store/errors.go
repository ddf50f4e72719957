package store

import "errors"

var (
	// ErrNotFound reports a key that is not in the store.
	ErrNotFound = errors.New("store: not found")
	// ErrCorrupt reports a stored value that does not decode.
	ErrCorrupt = errors.New("store: corrupt value")
	// ErrClosed reports use of a closed store.
	ErrClosed = errors.New("store: closed")
	// ErrTooLarge reports a flush too large for one transaction.
	ErrTooLarge = errors.New("store: flush too large for one transaction")
)
