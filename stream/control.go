package stream

import (
	"context"
	"encoding/json"
	"fmt"
)

// Control is an operator command carried on the control subject, applied
// by every replica at its place in the log.
type Control struct {
	// Forget names a session whose data every replica deletes.
	Forget string `json:"forget,omitempty"`
}

// DecodeControl decodes and validates a control message.
func DecodeControl(data []byte) (Control, error) {
	var c Control
	if err := json.Unmarshal(data, &c); err != nil {
		return c, &FieldError{Reason: "control message: " + err.Error(), Err: ErrInvalidEvent}
	}
	if c.Forget == "" {
		return c, &FieldError{Field: "forget", Reason: "missing: a control message must name a command", Err: ErrInvalidEvent}
	}
	if err := validateID("forget", c.Forget, MaxSessionBytes, true, true, ErrInvalidEvent); err != nil {
		return c, err
	}
	return c, nil
}

// PublishControl publishes a control message and returns its sequence.
func (b *Bus) PublishControl(ctx context.Context, c Control) (uint64, error) {
	data, err := json.Marshal(c)
	if err != nil {
		return 0, fmt.Errorf("encode control message: %w", err)
	}
	ack, err := b.js.Publish(ctx, b.opts.ControlSubject, data)
	if err != nil {
		return 0, fmt.Errorf("publish control message: %w", err)
	}
	return ack.Sequence, nil
}
