package dataset

import (
	"context"
	"errors"
	"fmt"
	"io"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"waymark/stream"
)

// RangeOptions selects a range of a JetStream stream for [OpenRange].
type RangeOptions struct {
	Stream string // required
	// Subject carries click events (default "waymark.events");
	// CatalogSubject carries catalogue records (default "waymark.catalog").
	// Other subjects of the stream are not read.
	Subject, CatalogSubject string
	// FromSeq and ToSeq bound the range by stream sequence, both included;
	// 0 means the first message and the last message the stream holds when
	// the range is opened.
	FromSeq, ToSeq uint64
	// FromTime and ToTime bound the range by the time the server stored
	// each message, both included; the zero time leaves that end open. A
	// sequence bound and a time bound on the same end cannot be combined.
	FromTime, ToTime time.Time
	// Batch is how many messages one fetch asks for (default 1000).
	Batch int
	// FetchWait bounds one fetch (default 5 s); a range that stops arriving
	// before its end is reported as an error, not waited on forever.
	FetchWait time.Duration
}

func (o *RangeOptions) validate() error {
	d := stream.DefaultBusOptions()
	if o.Subject == "" {
		o.Subject = d.Subject
	}
	if o.CatalogSubject == "" {
		o.CatalogSubject = d.CatalogSubject
	}
	if o.Batch == 0 {
		o.Batch = 1000
	}
	if o.FetchWait == 0 {
		o.FetchWait = 5 * time.Second
	}
	switch {
	case o.Stream == "":
		return fmt.Errorf("%w: Stream is required", ErrBadOption)
	case o.Subject == o.CatalogSubject:
		return fmt.Errorf("%w: Subject and CatalogSubject are both %q", ErrBadOption, o.Subject)
	case o.FromSeq > 0 && !o.FromTime.IsZero():
		return fmt.Errorf("%w: FromSeq and FromTime both set; give one start", ErrBadOption)
	case o.ToSeq > 0 && !o.ToTime.IsZero():
		return fmt.Errorf("%w: ToSeq and ToTime both set; give one end", ErrBadOption)
	case o.ToSeq > 0 && o.FromSeq > o.ToSeq:
		return fmt.Errorf("%w: FromSeq %d after ToSeq %d", ErrBadOption, o.FromSeq, o.ToSeq)
	case !o.ToTime.IsZero() && o.FromTime.After(o.ToTime):
		return fmt.Errorf("%w: FromTime %s after ToTime %s", ErrBadOption, o.FromTime.Format(time.RFC3339), o.ToTime.Format(time.RFC3339))
	case o.Batch < 1:
		return fmt.Errorf("%w: Batch %d below 1", ErrBadOption, o.Batch)
	case o.FetchWait < 0:
		return fmt.Errorf("%w: FetchWait is negative", ErrBadOption)
	}
	return nil
}

// RangeReader reads a range of a stream; see OpenRange.
type RangeReader struct {
	// ctx bounds every fetch. Reader has no context parameter, so the one
	// given to OpenRange is kept for the reader's life.
	ctx     context.Context
	opts    RangeOptions
	cons    jetstream.Consumer
	end     uint64 // last stream sequence of the range
	buf     []jetstream.Msg
	done    bool
	pending []stream.ItemRecord
	left    uint64 // messages the consumer has yet to deliver, as the server last said
	read    uint64
	err     error
}

// OpenRange opens a range of a stream through an ordered consumer (no
// acknowledgements, no durable state on the server).
func OpenRange(ctx context.Context, js jetstream.JetStream, opts RangeOptions) (*RangeReader, error) {
	if err := opts.validate(); err != nil {
		return nil, err
	}
	s, err := js.Stream(ctx, opts.Stream)
	if err != nil {
		return nil, fmt.Errorf("open range of stream %q: %w", opts.Stream, err)
	}
	st := s.CachedInfo().State
	r := &RangeReader{ctx: ctx, opts: opts, end: st.LastSeq}
	if opts.ToSeq > 0 && opts.ToSeq < r.end {
		r.end = opts.ToSeq
	}
	if st.Msgs == 0 || opts.FromSeq > r.end {
		r.done = true
		return r, nil
	}
	cfg := jetstream.OrderedConsumerConfig{FilterSubjects: []string{opts.Subject, opts.CatalogSubject}}
	switch {
	case opts.FromSeq > 0:
		cfg.DeliverPolicy, cfg.OptStartSeq = jetstream.DeliverByStartSequencePolicy, opts.FromSeq
	case !opts.FromTime.IsZero():
		t := opts.FromTime
		cfg.DeliverPolicy, cfg.OptStartTime = jetstream.DeliverByStartTimePolicy, &t
	}
	cons, err := js.OrderedConsumer(ctx, opts.Stream, cfg)
	if err != nil {
		return nil, fmt.Errorf("open range of stream %q: %w", opts.Stream, err)
	}
	info, err := cons.Info(ctx)
	if err != nil {
		return nil, fmt.Errorf("open range of stream %q: %w", opts.Stream, err)
	}
	r.cons = cons
	r.left = info.NumPending
	r.done = info.NumPending == 0
	return r, nil
}

// Read returns how many messages of the range have been read.
func (r *RangeReader) Read() uint64 { return r.read }

// TakeItems returns the catalogue records met since the last call, in
// stream order; they came before the event Next returned last.
func (r *RangeReader) TakeItems() []stream.ItemRecord {
	out := r.pending
	r.pending = nil
	return out
}

// Next returns the next click event of the range. A message that does not
// decode comes back as a *stream.LineError whose Line is the message's
// stream sequence.
func (r *RangeReader) Next() (stream.Event, error) {
	for {
		if r.err != nil {
			return stream.Event{}, r.err
		}
		if len(r.buf) == 0 {
			if r.done {
				r.err = io.EOF
				return stream.Event{}, r.err
			}
			if err := r.fetch(); err != nil {
				r.err = err
				return stream.Event{}, err
			}
			continue
		}
		m := r.buf[0]
		r.buf = r.buf[1:]
		meta, err := m.Metadata()
		if err != nil {
			r.err = fmt.Errorf("range of stream %q: message metadata: %w", r.opts.Stream, err)
			return stream.Event{}, r.err
		}
		seq := meta.Sequence.Stream
		if seq > r.end || (!r.opts.ToTime.IsZero() && meta.Timestamp.After(r.opts.ToTime)) {
			r.done, r.buf = true, nil
			continue
		}
		r.left = meta.NumPending
		if meta.NumPending == 0 || seq == r.end {
			r.done = true
		}
		r.read++
		if m.Subject() == r.opts.CatalogSubject {
			rec, err := stream.DecodeItemJSON(m.Data())
			if err != nil {
				return stream.Event{}, &stream.LineError{Line: int(seq), Err: err}
			}
			rec.Seq = seq
			r.pending = append(r.pending, rec)
			continue
		}
		ev, err := stream.DecodeJSON(m.Data())
		if err != nil {
			return stream.Event{}, &stream.LineError{Line: int(seq), Err: err}
		}
		ev.Seq = seq
		return ev, nil
	}
}

func (r *RangeReader) fetch() error {
	if err := r.ctx.Err(); err != nil {
		return err
	}
	// Asking for no more than the server says is left lets the fetch
	// return at once instead of waiting out FetchWait for a full batch.
	n := r.opts.Batch
	if r.left > 0 && r.left < uint64(n) {
		n = int(r.left)
	}
	batch, err := r.cons.Fetch(n, jetstream.FetchMaxWait(r.opts.FetchWait))
	if err != nil {
		return fmt.Errorf("range of stream %q: fetch: %w", r.opts.Stream, err)
	}
	for m := range batch.Messages() {
		r.buf = append(r.buf, m)
	}
	if err := batch.Error(); err != nil && !errors.Is(err, jetstream.ErrNoMessages) {
		return fmt.Errorf("range of stream %q: fetch: %w", r.opts.Stream, err)
	}
	if len(r.buf) == 0 {
		return fmt.Errorf("range of stream %q: no message within %s before sequence %d", r.opts.Stream, r.opts.FetchWait, r.end)
	}
	return nil
}
