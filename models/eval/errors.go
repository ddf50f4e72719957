package eval

import "errors"

var (
	// ErrBadOption reports an invalid option; the message names the field.
	ErrBadOption = errors.New("eval: bad option")
	// ErrOutOfOrder reports an event earlier than the one before it in the
	// same source, when sorting was not allowed.
	ErrOutOfOrder = errors.New("eval: events out of time order")
	// ErrNoEvents reports a replay with nothing left to replay.
	ErrNoEvents = errors.New("eval: no events")
)
