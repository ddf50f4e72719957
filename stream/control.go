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
	// Served records the items a caller reported it displayed for one
	// answer (POST /v1/shown), so every replica counts the same
	// impressions of fresh items and credits a later click.
	Served *Served `json:"served,omitempty"`
	// ServedBatch is several Served records in one message. Serve no
	// longer publishes it (older versions did, for every answer); it is
	// still applied, so older logs replay the same.
	ServedBatch []Served `json:"served_batch,omitempty"`
	// Prior carries one item's neighbours imported from another
	// deployment (waymark priors import).
	Prior *PriorRow `json:"prior,omitempty"`
}

// PriorRow is one item's neighbours in the priors format (FORMAT.md):
// weights in [0, 1] per exporting model, already scaled by the import
// weight when it travels as a control message.
type PriorRow struct {
	Model     string          `json:"model,omitempty"`
	Item      string          `json:"item"`
	Neighbors []PriorNeighbor `json:"neighbors"`
}

// PriorNeighbor is one neighbour and its weight.
type PriorNeighbor struct {
	Item   string  `json:"item"`
	Weight float64 `json:"weight"`
}

// Validate checks a prior row's ids and weights.
func (r *PriorRow) Validate() error {
	if err := validateID("prior.item", r.Item, MaxItemBytes, true, true, ErrInvalidEvent); err != nil {
		return err
	}
	if len(r.Neighbors) == 0 || len(r.Neighbors) > 10_000 {
		return &FieldError{Field: "prior.neighbors", Reason: "must hold 1 to 10000 neighbours", Err: ErrInvalidEvent}
	}
	for _, n := range r.Neighbors {
		if err := validateID("prior.neighbors.item", n.Item, MaxItemBytes, true, true, ErrInvalidEvent); err != nil {
			return err
		}
		if !(n.Weight >= 0 && n.Weight <= 1e6) {
			return &FieldError{Field: "prior.neighbors.weight", Reason: "must be a number from 0 to 1e6", Err: ErrInvalidEvent}
		}
	}
	return nil
}

// Served is what one answer showed: the items displayed, in order.
type Served struct {
	Session string   `json:"session,omitempty"` // empty when none is known
	Items   []string `json:"items"`
	TS      int64    `json:"ts"` // event time of the answer
	Request string   `json:"request,omitempty"`
}

// MaxServedBatch bounds the records of one served_batch message;
// MaxServedItems the items of one record; MaxRequestBytes a request id.
const (
	MaxServedBatch  = 1000
	MaxServedItems  = 1000
	MaxRequestBytes = 128
)

// Validate checks a record's ids and sizes, naming fields as the HTTP
// body of POST /v1/shown does.
func (s *Served) Validate() error { return s.validate("") }

func (s *Served) validate(prefix string) error {
	if err := validateID(prefix+"request", s.Request, MaxRequestBytes, false, true, ErrInvalidEvent); err != nil {
		return err
	}
	if err := validateID(prefix+"session", s.Session, MaxSessionBytes, false, true, ErrInvalidEvent); err != nil {
		return err
	}
	if len(s.Items) == 0 || len(s.Items) > MaxServedItems {
		return &FieldError{Field: prefix + "items", Reason: fmt.Sprintf("must hold 1 to %d items, got %d", MaxServedItems, len(s.Items)), Err: ErrInvalidEvent}
	}
	for i, it := range s.Items {
		if err := validateID(fmt.Sprintf("%sitems[%d]", prefix, i), it, MaxItemBytes, true, true, ErrInvalidEvent); err != nil {
			return err
		}
	}
	return nil
}

// DecodeControl decodes and validates a control message.
func DecodeControl(data []byte) (Control, error) {
	var c Control
	if err := json.Unmarshal(data, &c); err != nil {
		return c, &FieldError{Reason: "control message: " + err.Error(), Err: ErrInvalidEvent}
	}
	n := 0
	for _, set := range []bool{c.Forget != "", c.Served != nil, c.ServedBatch != nil, c.Prior != nil} {
		if set {
			n++
		}
	}
	switch {
	case n > 1:
		return c, &FieldError{Reason: "a control message carries one command", Err: ErrInvalidEvent}
	case c.Prior != nil:
		if err := c.Prior.Validate(); err != nil {
			return c, err
		}
	case c.Forget != "":
		if err := validateID("forget", c.Forget, MaxSessionBytes, true, true, ErrInvalidEvent); err != nil {
			return c, err
		}
	case c.Served != nil:
		if err := c.Served.validate("served."); err != nil {
			return c, err
		}
	case c.ServedBatch != nil:
		if len(c.ServedBatch) == 0 || len(c.ServedBatch) > MaxServedBatch {
			return c, &FieldError{Field: "served_batch", Reason: fmt.Sprintf("must hold 1 to %d records", MaxServedBatch), Err: ErrInvalidEvent}
		}
		for i := range c.ServedBatch {
			if err := c.ServedBatch[i].validate("served_batch."); err != nil {
				return c, err
			}
		}
	default:
		return c, &FieldError{Reason: "missing: a control message must name a command (forget, served, served_batch or prior)", Err: ErrInvalidEvent}
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
