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
	// Served records items a response showed in its exploration slots, so
	// every replica counts the same impressions and credits a later click.
	Served *Served `json:"served,omitempty"`
}

// Served is one response's exploration items.
type Served struct {
	Session string   `json:"session,omitempty"` // empty for a sequence sent by the caller
	Items   []string `json:"items"`
	TS      int64    `json:"ts"` // event time of the response
	Request string   `json:"request,omitempty"`
}

// DecodeControl decodes and validates a control message.
func DecodeControl(data []byte) (Control, error) {
	var c Control
	if err := json.Unmarshal(data, &c); err != nil {
		return c, &FieldError{Reason: "control message: " + err.Error(), Err: ErrInvalidEvent}
	}
	switch {
	case c.Forget != "" && c.Served != nil:
		return c, &FieldError{Reason: "a control message carries one command", Err: ErrInvalidEvent}
	case c.Forget != "":
		if err := validateID("forget", c.Forget, MaxSessionBytes, true, true, ErrInvalidEvent); err != nil {
			return c, err
		}
	case c.Served != nil:
		if err := validateID("served.session", c.Served.Session, MaxSessionBytes, false, true, ErrInvalidEvent); err != nil {
			return c, err
		}
		if len(c.Served.Items) == 0 || len(c.Served.Items) > 1000 {
			return c, &FieldError{Field: "served.items", Reason: "must hold 1 to 1000 items", Err: ErrInvalidEvent}
		}
		for _, it := range c.Served.Items {
			if err := validateID("served.items", it, MaxItemBytes, true, true, ErrInvalidEvent); err != nil {
				return c, err
			}
		}
	default:
		return c, &FieldError{Reason: "missing: a control message must name a command (forget or served)", Err: ErrInvalidEvent}
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

// PublishControlAsync publishes a control message without waiting for its
// acknowledgement; for records whose loss costs little, such as impressions.
func (b *Bus) PublishControlAsync(c Control) error {
	data, err := json.Marshal(c)
	if err != nil {
		return fmt.Errorf("encode control message: %w", err)
	}
	if _, err := b.js.PublishAsync(b.opts.ControlSubject, data); err != nil {
		return fmt.Errorf("publish control message: %w", err)
	}
	return nil
}
