package stream

import (
	"errors"
	"strconv"
)

// Sentinel errors. Callers branch on them with errors.Is; the wrapped error
// carries the detail (which field, which line, which option).
var (
	// ErrInvalidEvent marks a click event that failed to decode or validate.
	ErrInvalidEvent = errors.New("stream: invalid event")
	// ErrInvalidItem marks a catalogue record that failed to decode or validate.
	ErrInvalidItem = errors.New("stream: invalid item record")
	// ErrBadHeader marks a CSV header that does not name the required columns.
	ErrBadHeader = errors.New("stream: bad csv header")
	// ErrLineTooLong marks an input line longer than MaxLineBytes.
	ErrLineTooLong = errors.New("stream: line too long")
	// ErrInvalidOptions marks options that failed validation.
	ErrInvalidOptions = errors.New("stream: invalid options")
	// ErrClosed is returned by a Bus after Close.
	ErrClosed = errors.New("stream: bus closed")
	// ErrNoAck is returned by Msg.AckAll for a message that did not come from
	// the bus (for instance one built by a test).
	ErrNoAck = errors.New("stream: message has no bus acknowledgement")
)

// FieldError says which field of an event or item record is wrong and why.
// Err is ErrInvalidEvent or ErrInvalidItem, so errors.Is works on the sentinel
// while callers that count rejections by cause can read Field.
type FieldError struct {
	Field  string // "session", "item", "ts", ...; "" for the record as a whole (malformed JSON, wrong field count)
	Reason string
	Err    error
}

func (e *FieldError) Error() string {
	if e.Field == "" {
		return e.Err.Error() + ": " + e.Reason
	}
	return e.Err.Error() + ": " + e.Field + ": " + e.Reason
}

func (e *FieldError) Unwrap() error { return e.Err }

func eventErr(field, reason string) error {
	return &FieldError{Field: field, Reason: reason, Err: ErrInvalidEvent}
}

func itemErr(field, reason string) error {
	return &FieldError{Field: field, Reason: reason, Err: ErrInvalidItem}
}

// LineError is a bad line in a file. A Reader that returns one has already
// moved past the line, so the next call to Next continues with the line after.
type LineError struct {
	Line int // 1-based physical line number, blank lines included
	Err  error
}

func (e *LineError) Error() string { return "line " + strconv.Itoa(e.Line) + ": " + e.Err.Error() }

func (e *LineError) Unwrap() error { return e.Err }
