package stream

import (
	"context"
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"
	"unicode/utf8"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
)

// Header names on dead-letter messages.
const (
	HeaderReason = "Waymark-Reason" // why the message was rejected
	HeaderSeq    = "Waymark-Seq"    // its sequence in the events stream, when it came from there
)

// maxReasonBytes caps the reason header; the full message is in the log.
const maxReasonBytes = 1024

// PublishEvents publishes events in their canonical JSON form to the events
// subject and waits until JetStream has acknowledged every one. Events with
// an ID carry it as Nats-Msg-Id, so JetStream drops a repeat within its
// duplicate window (2 minutes by default) and a retried upload is not counted
// twice. Events are not validated here; callers publish what they decoded.
func (b *Bus) PublishEvents(ctx context.Context, evs []Event) error {
	if len(evs) == 0 {
		return nil
	}
	// One buffer for all payloads. The client keeps each message until it is
	// acknowledged (it may resend it), so payloads must not share a reused
	// buffer; a single allocation sliced per event is the cheap way.
	size := 0
	for i := range evs {
		size += len(evs[i].Session) + len(evs[i].Item) + len(evs[i].ID) + 72
	}
	buf := make([]byte, 0, size)
	ends := make([]int, len(evs))
	for i := range evs {
		buf = evs[i].AppendJSON(buf)
		ends[i] = len(buf)
	}
	payload := func(i int) []byte {
		start := 0
		if i > 0 {
			start = ends[i-1]
		}
		return buf[start:ends[i]:ends[i]]
	}
	return b.publish(ctx, b.opts.Subject, len(evs), payload, func(i int) string { return evs[i].ID })
}

// PublishRaw publishes payloads as they are to subject (for instance raw
// lines, or catalogue records to CatalogSubject) and waits for every
// acknowledgement. The payloads must not be modified until it returns.
func (b *Bus) PublishRaw(ctx context.Context, subject string, data [][]byte) error {
	if err := checkLiteralSubject(subject); err != nil {
		return fmt.Errorf("%w: subject %q: %w", ErrInvalidOptions, subject, err)
	}
	return b.publish(ctx, subject, len(data), func(i int) []byte { return data[i] }, nil)
}

// publish runs asynchronous publishes with at most PublishWindow of them
// unacknowledged, waiting on the oldest when the window is full (acks come
// back roughly in order, so the oldest is the one to wait for).
func (b *Bus) publish(ctx context.Context, subject string, n int, payload func(int) []byte, msgID func(int) string) error {
	if b.isClosed() {
		return ErrClosed
	}
	window := min(b.opts.PublishWindow, n)
	ring := make([]jetstream.PubAckFuture, window)
	idx := make([]int, window) // message index of each ring slot, for errors
	head, inflight := 0, 0
	var opt [1]jetstream.PublishOpt

	wait := func() error {
		f, i := ring[head], idx[head]
		ring[head] = nil
		head = (head + 1) % window
		inflight--
		select {
		case <-f.Ok():
			b.metrics.published.Inc()
			return nil
		case err := <-f.Err():
			b.metrics.publishFailures.Inc()
			return fmt.Errorf("publish message %d of %d to %s: %w", i+1, n, subject, err)
		case <-ctx.Done():
			return fmt.Errorf("publish to %s: waiting for acknowledgement of message %d of %d: %w", subject, i+1, n, ctx.Err())
		}
	}
	for i := 0; i < n; i++ {
		if inflight == window {
			if err := wait(); err != nil {
				return err
			}
		}
		opts := opt[:0]
		if msgID != nil {
			if id := msgID(i); id != "" {
				opts = append(opts, jetstream.WithMsgID(id))
			}
		}
		var f jetstream.PubAckFuture
		for {
			var err error
			f, err = b.js.PublishAsync(subject, payload(i), opts...)
			if err == nil {
				break
			}
			if !errors.Is(err, jetstream.ErrTooManyStalledMsgs) {
				b.metrics.publishFailures.Inc()
				return fmt.Errorf("publish message %d of %d to %s: %w", i+1, n, subject, err)
			}
			// Other callers fill the shared client window; wait for ours to
			// drain a little, or for theirs.
			if inflight > 0 {
				if err := wait(); err != nil {
					return err
				}
			} else {
				select {
				case <-b.js.PublishAsyncComplete():
				case <-time.After(10 * time.Millisecond):
				case <-ctx.Done():
					return fmt.Errorf("publish message %d of %d to %s: %w", i+1, n, subject, ctx.Err())
				}
			}
		}
		slot := (head + inflight) % window
		ring[slot], idx[slot] = f, i
		inflight++
	}
	for inflight > 0 {
		if err := wait(); err != nil {
			return err
		}
	}
	return nil
}

// DeadLetter copies a rejected message to the dead-letter subject with the
// reason and its stream sequence (0: not from the stream) in headers, and
// waits for the acknowledgement. Messages from the stream carry
// Nats-Msg-Id "<Stream>-<seq>", so re-processing after a restart does not
// file the same message twice within the duplicate window.
func (b *Bus) DeadLetter(ctx context.Context, data []byte, seq uint64, reason string) error {
	if b.isClosed() {
		return ErrClosed
	}
	m := nats.NewMsg(b.opts.DeadLetterSubject)
	m.Data = data
	m.Header.Set(HeaderReason, headerValue(reason))
	m.Header.Set(HeaderSeq, strconv.FormatUint(seq, 10))
	var opts []jetstream.PublishOpt
	if seq > 0 {
		opts = append(opts, jetstream.WithMsgID(b.opts.Stream+"-"+strconv.FormatUint(seq, 10)))
	}
	if _, err := b.js.PublishMsg(ctx, m, opts...); err != nil {
		b.metrics.publishFailures.Inc()
		return fmt.Errorf("dead-letter message %d: %w", seq, err)
	}
	b.metrics.deadLetters.Inc()
	return nil
}

// headerValue makes reason safe for a NATS header: one line, valid UTF-8,
// bounded length.
func headerValue(reason string) string {
	reason = strings.ToValidUTF8(reason, "\uFFFD")
	reason = strings.Map(func(r rune) rune {
		if r < 0x20 || r == 0x7f {
			return ' '
		}
		return r
	}, reason)
	if len(reason) > maxReasonBytes {
		n := maxReasonBytes
		for n > 0 && !utf8.RuneStart(reason[n]) {
			n--
		}
		reason = reason[:n]
	}
	if reason == "" {
		reason = "unspecified"
	}
	return reason
}
