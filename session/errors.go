package session

import "errors"

var (
	// ErrBadOption reports an invalid option; the message names it.
	ErrBadOption = errors.New("session: bad option")
	// ErrCorrupt reports a stored session that does not decode.
	ErrCorrupt = errors.New("session: corrupt stored session")
	// ErrClosed reports use of an engine after Close.
	ErrClosed = errors.New("session: engine closed")
	// ErrUnknownCategory reports a category no catalogue item is in.
	ErrUnknownCategory = errors.New("session: unknown category")
	// ErrConfigChanged reports a store learned with another model set.
	ErrConfigChanged = errors.New("session: store was built with a different model configuration")
)
