package bare

import (
	"context"
	"fmt"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"waymark/stream"
)

// ConsumeResult is what a bare consumer saw.
type ConsumeResult struct {
	N           int       // messages decoded and acknowledged
	Bad         int       // messages that failed to decode
	First, Last time.Time // arrival of the first and the last message
}

// Rate returns messages per second from the first to the last message.
func (r ConsumeResult) Rate() float64 {
	d := r.Last.Sub(r.First).Seconds()
	if d <= 0 || r.N < 2 {
		return 0
	}
	return float64(r.N-1) / d
}

// Consume is the fastest plain consumer of the events stream: one durable
// pull consumer with AckAll, a deep pull buffer, every message decoded with
// the project's hand-written decoder, one acknowledgement per ackEvery
// messages (AckAll covers the ones before). It stops after n messages or
// when ctx ends. onMsg, when set, sees every decoded event.
func Consume(ctx context.Context, js jetstream.JetStream, streamName, subject string, n, ackEvery int, onMsg func(*stream.Event)) (ConsumeResult, error) {
	var res ConsumeResult
	cons, err := js.CreateOrUpdateConsumer(ctx, streamName, jetstream.ConsumerConfig{
		Durable:       "bench-bare",
		AckPolicy:     jetstream.AckAllPolicy,
		DeliverPolicy: jetstream.DeliverAllPolicy,
		FilterSubject: subject,
		MaxAckPending: 1_000_000,
		ReplayPolicy:  jetstream.ReplayInstantPolicy,
	})
	if err != nil {
		return res, fmt.Errorf("bare consumer: %w", err)
	}
	it, err := cons.Messages(jetstream.PullMaxMessages(10_000))
	if err != nil {
		return res, fmt.Errorf("bare consumer: %w", err)
	}
	defer it.Stop()
	stop := context.AfterFunc(ctx, it.Stop)
	defer stop()
	for res.N < n {
		m, err := it.Next()
		if err != nil {
			if ctx.Err() != nil {
				return res, ctx.Err()
			}
			return res, fmt.Errorf("bare consumer: %w", err)
		}
		now := time.Now()
		if res.N == 0 {
			res.First = now
		}
		res.Last = now
		ev, err := stream.DecodeJSON(m.Data())
		if err != nil {
			res.Bad++
		} else if onMsg != nil {
			onMsg(&ev)
		}
		res.N++
		if res.N%ackEvery == 0 || res.N == n {
			if err := m.Ack(); err != nil {
				return res, fmt.Errorf("bare consumer: ack: %w", err)
			}
		}
	}
	return res, nil
}
