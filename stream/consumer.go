package stream

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go/jetstream"
)

// Msg is one message from the events stream.
type Msg struct {
	Seq     uint64 // stream sequence
	Subject string // the events or the catalogue subject
	Data    []byte
	Pending uint64 // messages left in the stream for this consumer after this one
	m       jetstream.Msg
}

// AckAll acknowledges this message and, under the AckAll policy, every
// message before it. It does not wait for the server; a lost ack only means
// a redelivery, which the consumer drops or the checkpoint skips. Acking the
// same message again is a no-op, so a flush on a timer can re-ack the last
// message it saw without checking.
func (m Msg) AckAll() error {
	if m.m == nil {
		return ErrNoAck
	}
	if err := m.m.Ack(); err != nil && !errors.Is(err, jetstream.ErrMsgAlreadyAckd) {
		return fmt.Errorf("ack %d: %w", m.Seq, err)
	}
	return nil
}

// AckAllSync is AckAll waiting for the server to confirm the ack, for callers
// that want to know (tests, shutdown).
func (m Msg) AckAllSync(ctx context.Context) error {
	if m.m == nil {
		return ErrNoAck
	}
	if err := m.m.DoubleAck(ctx); err != nil && !errors.Is(err, jetstream.ErrMsgAlreadyAckd) {
		return fmt.Errorf("ack %d: %w", m.Seq, err)
	}
	return nil
}

// DecodeMsg decodes a click event from a message and sets its Seq.
func DecodeMsg(m Msg) (Event, error) {
	ev, err := DecodeJSON(m.Data)
	if err != nil {
		return Event{}, err
	}
	ev.Seq = m.Seq
	return ev, nil
}

// Handler receives batches of messages in stream order, from one goroutine.
// It is also called with an empty slice when a fetch brings nothing (about
// every MaxWait while idle, and between retries while the server is away), so
// it can flush on a timer. A returned error stops the consumer; Err reports
// it. The slice is the handler's to keep. The handler must not call Stop or
// Bus.Close itself: they wait for it to return.
type Handler func(ctx context.Context, msgs []Msg) error

// Consumer delivers the events stream to a Handler; see Bus.Consume.
type Consumer struct {
	bus     *Bus
	opts    ConsumerOptions
	h       Handler
	log     *slog.Logger
	metrics *busMetrics

	cancel context.CancelFunc
	done   chan struct{}
	err    error // set by the loop before done is closed

	// Owned by the loop goroutine (and by Consume before it starts it).
	cons     jetstream.Consumer
	lastCSeq uint64 // delivery sequence of the last message seen from cons

	lastSeq atomic.Uint64 // last stream sequence handed to the handler
	pending atomic.Uint64 // Pending of that message
}

// Consume starts delivering the events stream to h from opts.StartSeq.
//
// Where delivery starts is the caller's decision (its checkpoint), not the
// server's: Consume deletes any durable consumer named opts.Name and creates
// a fresh durable pull consumer (AckAll, starting at StartSeq, or at the
// beginning when StartSeq <= 1 or below the stream's first sequence). It then
// fetches in batches and calls h synchronously. After a server restart, a
// lost connection or any gap in delivery, it re-creates the consumer from the
// last sequence handed to h plus one, with backoff, so h sees every sequence
// once and in order.
//
// ctx governs the consumer's whole life and is the context passed to h;
// cancelling it stops the consumer like Stop.
func (b *Bus) Consume(ctx context.Context, opts ConsumerOptions, h Handler) (*Consumer, error) {
	if h == nil {
		return nil, fmt.Errorf("%w: consumer: handler is nil", ErrInvalidOptions)
	}
	opts = opts.withDefaults()
	if err := opts.validate(); err != nil {
		return nil, err
	}
	if b.isClosed() {
		return nil, ErrClosed
	}
	c := &Consumer{
		bus:     b,
		opts:    opts,
		h:       h,
		log:     b.log.With("consumer", opts.Name, "stream", b.opts.Stream),
		metrics: b.metrics,
		done:    make(chan struct{}),
	}
	if opts.StartSeq > 1 {
		c.lastSeq.Store(opts.StartSeq - 1)
	}
	if err := c.create(ctx, opts.StartSeq); err != nil {
		return nil, err
	}
	loopCtx, cancel := context.WithCancel(ctx)
	c.cancel = cancel
	if err := b.track(c); err != nil {
		cancel()
		return nil, err
	}
	go c.run(ctx, loopCtx)
	return c, nil
}

// Stop stops fetching, waits for a handler call in progress to return and
// for the loop to exit. Messages fetched but not yet handed over are dropped;
// they were never acknowledged, so the next start (from the checkpoint) gets
// them again. Stop does not cancel the context h receives.
func (c *Consumer) Stop() {
	c.cancel()
	<-c.done
}

// Closed is closed when the consumer has stopped, for whatever reason.
func (c *Consumer) Closed() <-chan struct{} { return c.done }

// Err returns the handler's error that stopped the consumer, or nil (still
// running, stopped by Stop, or its context ended).
func (c *Consumer) Err() error {
	select {
	case <-c.done:
		return c.err
	default:
		return nil
	}
}

// LastSeq returns the last stream sequence handed to the handler (StartSeq-1
// before the first).
func (c *Consumer) LastSeq() uint64 { return c.lastSeq.Load() }

// Pending returns how many messages were left in the stream after the last
// one handed to the handler: the consumer's lag, 0 when caught up.
func (c *Consumer) Pending() uint64 { return c.pending.Load() }

// create replaces the durable consumer with one starting at start.
func (c *Consumer) create(ctx context.Context, start uint64) error {
	ctx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	js, stream, name := c.bus.js, c.bus.opts.Stream, c.opts.Name
	s, err := js.Stream(ctx, stream)
	if err != nil {
		return fmt.Errorf("consumer %s: stream %s: %w", name, stream, err)
	}
	st := s.CachedInfo().State
	cfg := jetstream.ConsumerConfig{
		Durable:           name,
		Description:       "waymark reader; its start is chosen by the reader's checkpoint",
		AckPolicy:         jetstream.AckAllPolicy,
		AckWait:           c.opts.AckWait,
		MaxAckPending:     c.opts.MaxAckPending,
		MaxDeliver:        -1,
		ReplayPolicy:      jetstream.ReplayInstantPolicy,
		FilterSubjects:    c.opts.FilterSubjects,
		MaxRequestBatch:   max(c.opts.Batch, 1),
		InactiveThreshold: c.opts.InactiveThreshold,
		// The reader's checkpoint, never the server's consumer state,
		// says where to start: every start replaces the consumer. So its
		// state (delivered and pending sequences) need not reach disk;
		// in a file it was rewritten whole, all pending sequences, many
		// times a second, since acks come only after each commit.
		MemoryStorage: true,
	}
	if start <= 1 || start <= st.FirstSeq {
		cfg.DeliverPolicy = jetstream.DeliverAllPolicy
		if start > 1 && start < st.FirstSeq {
			c.log.Warn("messages before the stream's first sequence are gone; starting at the first",
				"start", start, "first", st.FirstSeq)
		}
	} else {
		cfg.DeliverPolicy = jetstream.DeliverByStartSequencePolicy
		cfg.OptStartSeq = start
		if start > st.LastSeq+1 {
			c.log.Warn("start is beyond the end of the stream (was the stream re-created?); waiting for that sequence",
				"start", start, "last", st.LastSeq)
		}
	}
	for attempt := 0; ; attempt++ {
		if err := js.DeleteConsumer(ctx, stream, name); err != nil && !errors.Is(err, jetstream.ErrConsumerNotFound) {
			return fmt.Errorf("consumer %s: delete old: %w", name, err)
		}
		cons, err := js.CreateConsumer(ctx, stream, cfg)
		if errors.Is(err, jetstream.ErrConsumerExists) && attempt == 0 {
			continue // created by someone else in between; replace it once more
		}
		if err != nil {
			return fmt.Errorf("consumer %s: create: %w", name, err)
		}
		c.cons, c.lastCSeq = cons, 0
		c.log.Debug("consumer created", "start", start, "policy", cfg.DeliverPolicy.String())
		return nil
	}
}

func (c *Consumer) run(hctx, ctx context.Context) {
	defer func() {
		c.bus.untrack(c)
		close(c.done)
	}()
	var (
		pre     jetstream.MessageBatch // the next batch, requested while h works on the current one
		rebuild bool
		bo      = backoff{min: 100 * time.Millisecond, max: 5 * time.Second}
	)
	for ctx.Err() == nil {
		if rebuild {
			if !bo.wait(ctx) {
				return
			}
			if err := c.create(ctx, c.lastSeq.Load()+1); err != nil {
				if ctx.Err() != nil {
					return
				}
				c.metrics.fetchErrors.Inc()
				c.log.Warn("re-creating consumer failed; will retry", "err", err)
				if c.call(hctx, nil) != nil {
					return
				}
				continue
			}
			c.metrics.recreations.Inc()
			c.log.Info("consumer re-created", "start", c.lastSeq.Load()+1)
			rebuild = false
		}
		batch := pre
		pre = nil
		if batch == nil {
			var err error
			if batch, err = c.cons.Fetch(c.opts.Batch, jetstream.FetchMaxWait(c.opts.MaxWait)); err != nil {
				c.metrics.fetchErrors.Inc()
				c.log.Warn("fetch failed", "err", err)
				rebuild = true
				if c.call(hctx, nil) != nil {
					return
				}
				continue
			}
		}
		msgs, gap, err := c.collect(ctx, batch)
		if ctx.Err() != nil {
			return
		}
		if err == nil && !gap {
			// Ask for the next batch before handing this one over, so the
			// network works while the handler does.
			pre, _ = c.cons.Fetch(c.opts.Batch, jetstream.FetchMaxWait(c.opts.MaxWait))
		}
		if c.call(hctx, msgs) != nil {
			return
		}
		switch {
		case err != nil:
			c.metrics.fetchErrors.Inc()
			c.log.Warn("fetch ended with an error; re-creating the consumer", "err", err, "last", c.lastSeq.Load())
			rebuild = true
		case gap:
			c.log.Warn("gap in delivery; re-creating the consumer", "last", c.lastSeq.Load())
			rebuild = true
		default:
			bo.reset()
		}
	}
}

// call hands msgs to the handler and records the error that stops the loop.
func (c *Consumer) call(ctx context.Context, msgs []Msg) error {
	if n := len(msgs); n > 0 {
		c.lastSeq.Store(msgs[n-1].Seq)
		c.pending.Store(msgs[n-1].Pending)
		c.metrics.delivered.Add(float64(n))
	}
	if err := c.h(ctx, msgs); err != nil {
		c.err = err
		return err
	}
	return nil
}

// collect reads one fetched batch. It drops redeliveries of sequences already
// handed over, and reports a gap when the delivery sequence skips (a message
// the server counts as delivered never arrived): the caller then re-creates
// the consumer after the last message it handed over, rather than trust the
// server to redeliver in order.
func (c *Consumer) collect(ctx context.Context, batch jetstream.MessageBatch) (msgs []Msg, gap bool, err error) {
	last := c.lastSeq.Load()
	ch := batch.Messages()
	for {
		select {
		case <-ctx.Done():
			return nil, false, ctx.Err()
		case jm, ok := <-ch:
			if !ok {
				return msgs, false, batch.Error()
			}
			meta, err := jm.Metadata()
			if err != nil {
				return msgs, true, nil
			}
			if c.lastCSeq != 0 && meta.Sequence.Consumer != c.lastCSeq+1 {
				return msgs, true, nil
			}
			c.lastCSeq = meta.Sequence.Consumer
			seq := meta.Sequence.Stream
			if seq <= last {
				c.metrics.redelivered.Inc()
				continue
			}
			last = seq
			if msgs == nil {
				msgs = make([]Msg, 0, c.opts.Batch)
			}
			msgs = append(msgs, Msg{Seq: seq, Subject: jm.Subject(), Data: jm.Data(), Pending: meta.NumPending, m: jm})
		}
	}
}

// backoff doubles a pause from min to max, with jitter so that many readers
// do not retry in step after a server restart.
type backoff struct{ cur, min, max time.Duration }

func (b *backoff) reset() { b.cur = 0 }

func (b *backoff) wait(ctx context.Context) bool {
	if b.cur == 0 {
		b.cur = b.min
	}
	d := b.cur/2 + time.Duration(rand.Int64N(int64(b.cur)))
	b.cur = min(2*b.cur, b.max)
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
		return true
	case <-ctx.Done():
		return false
	}
}
