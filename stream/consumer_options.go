package stream

import (
	"errors"
	"fmt"
	"time"
)

// ConsumerOptions configure Consume.
type ConsumerOptions struct {
	// Name of the durable consumer (required). Each independent reader of the
	// stream (each service data folder) needs its own name, or they take
	// messages from each other.
	Name string
	// StartSeq is the first stream sequence to deliver; 0 or 1 means from
	// the start. It comes from the caller's checkpoint, never from the
	// server's consumer state.
	StartSeq uint64
	Batch    int           // messages per fetch, default 1000
	MaxWait  time.Duration // how long a fetch waits for a full batch, default 100ms
	// MaxAckPending bounds delivered-but-unacknowledged messages, default
	// 20000. The handler must ack (AckAll) before it holds this many, or
	// delivery pauses until it does.
	MaxAckPending int
	// AckWait is how long the server waits for an ack before redelivering,
	// default 30 s. Redeliveries of messages already handed over are dropped
	// by the consumer, so a slow flush costs bandwidth, not correctness.
	AckWait time.Duration
	// InactiveThreshold lets the server delete the durable consumer after
	// this long without a reader (default 72 h), so data folders that were
	// thrown away leave no consumers behind. A reader that comes back later
	// loses nothing: it re-creates its consumer from its own checkpoint.
	InactiveThreshold time.Duration
	// FilterSubjects restricts delivery to some of the stream's subjects;
	// empty delivers everything (events and catalogue records).
	FilterSubjects []string
}

// DefaultConsumerOptions returns the defaults (Name still to be set).
func DefaultConsumerOptions() ConsumerOptions {
	return ConsumerOptions{
		Batch:             1000,
		MaxWait:           100 * time.Millisecond,
		MaxAckPending:     20000,
		AckWait:           30 * time.Second,
		InactiveThreshold: 72 * time.Hour,
	}
}

func (o ConsumerOptions) withDefaults() ConsumerOptions {
	d := DefaultConsumerOptions()
	if o.Batch == 0 {
		o.Batch = d.Batch
	}
	if o.MaxWait == 0 {
		o.MaxWait = d.MaxWait
	}
	if o.MaxAckPending == 0 {
		o.MaxAckPending = d.MaxAckPending
	}
	if o.AckWait == 0 {
		o.AckWait = d.AckWait
	}
	if o.InactiveThreshold == 0 {
		o.InactiveThreshold = d.InactiveThreshold
	}
	return o
}

func (o ConsumerOptions) validate() error {
	var errs []error
	bad := func(field, format string, args ...any) {
		errs = append(errs, fmt.Errorf("%s: "+format, append([]any{field}, args...)...))
	}
	if err := checkStreamName(o.Name); err != nil {
		bad("Name", "%v", err)
	}
	if o.Batch < 1 || o.Batch > 100000 {
		bad("Batch", "%d, must be 1..100000", o.Batch)
	}
	if o.MaxWait < time.Millisecond {
		bad("MaxWait", "%v, must be at least 1ms", o.MaxWait)
	}
	if o.MaxAckPending < o.Batch {
		bad("MaxAckPending", "%d, must be at least Batch (%d)", o.MaxAckPending, o.Batch)
	}
	if o.AckWait < time.Second {
		bad("AckWait", "%v, must be at least 1s", o.AckWait)
	}
	for _, s := range o.FilterSubjects {
		if s == "" {
			bad("FilterSubjects", "empty subject")
		}
	}
	if len(errs) == 0 {
		return nil
	}
	return fmt.Errorf("%w: consumer: %w", ErrInvalidOptions, errors.Join(errs...))
}
