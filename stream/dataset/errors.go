package dataset

import "errors"

var (
	// ErrBadHeader reports a dataset file whose header is not the one the
	// format expects.
	ErrBadHeader = errors.New("dataset: bad header")
	// ErrBadRecord reports a record of a dataset file that does not parse.
	// It comes wrapped in a *stream.LineError.
	ErrBadRecord = errors.New("dataset: bad record")
	// ErrUnknownFormat reports a format name Open does not know.
	ErrUnknownFormat = errors.New("dataset: unknown format")
	// ErrBadOption reports an invalid option; the message names it.
	ErrBadOption = errors.New("dataset: bad option")
)
