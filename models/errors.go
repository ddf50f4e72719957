package models

import "errors"

var (
	// ErrCorrupt reports a stored entry that a model cannot decode.
	ErrCorrupt = errors.New("models: corrupt stored entry")
	// ErrUnknownModel reports a spec naming no model.
	ErrUnknownModel = errors.New("models: unknown model")
	// ErrBadSpec reports a model spec that does not parse or has a bad parameter.
	ErrBadSpec = errors.New("models: bad model spec")
)
