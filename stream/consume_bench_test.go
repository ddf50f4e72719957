package stream_test

import (
	"context"
	"fmt"
	"testing"
	"time"

	"waymark/bench/bare"
	"waymark/bench/synth"
	"waymark/stream"
)

// Consuming a pre-filled stream of ~200-byte events on an embedded server:
// the package's Consumer (batched fetch with one batch prefetched, gap
// detection, a handler per batch that decodes every message and acks the
// last) against the bare consumer of bench/bare (a deep pull buffer,
// decode, AckAll every 1000), in one process. bench/cmd/ingest compares
// whole processes A B A B; this isolates the consumer for a profile:
//
//	go test -run '^$' -bench BenchmarkConsume -benchtime 3x ./stream

const consumeEvents = 200_000

func filledBus(b *testing.B) *stream.Bus {
	b.Helper()
	ctx := context.Background()
	ns, err := stream.StartServer(ctx, stream.ServerOptions{Dir: b.TempDir(), Listen: "127.0.0.1:-1"})
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() { ns.Shutdown(context.Background()) })
	o := stream.DefaultBusOptions()
	o.URL = ns.ClientURL()
	bus, err := stream.Connect(ctx, o)
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(bus.Close)
	if err := bus.EnsureStreams(ctx); err != nil {
		b.Fatal(err)
	}
	g := synth.NewGen(synth.Options{Items: 100_000, Concurrent: 1000})
	for sent := 0; sent < consumeEvents; sent += 10_000 {
		var buf []byte
		data := make([][]byte, 10_000)
		for i := range data {
			ev := g.Next()
			s := len(buf)
			buf = synth.AppendLine(buf, &ev, uint64(sent+i))
			data[i] = buf[s:len(buf):len(buf)]
		}
		if err := bus.PublishRaw(ctx, o.Subject, data); err != nil {
			b.Fatal(err)
		}
	}
	return bus
}

func BenchmarkConsume(b *testing.B) {
	bus := filledBus(b)
	ctx := context.Background()
	b.Run("consumer", func(b *testing.B) {
		b.ReportAllocs()
		n := 0
		var total time.Duration
		for b.Loop() {
			n++
			done := make(chan struct{})
			got, closed := 0, false
			start := time.Now()
			c, err := bus.Consume(ctx, stream.ConsumerOptions{Name: fmt.Sprintf("bench-%d", n), Batch: 1000, MaxAckPending: 500_000}, func(ctx context.Context, msgs []stream.Msg) error {
				for i := range msgs {
					if _, err := stream.DecodeJSON(msgs[i].Data); err != nil {
						return err
					}
				}
				if len(msgs) > 0 {
					msgs[len(msgs)-1].AckAll()
				}
				if got += len(msgs); got >= consumeEvents && !closed {
					close(done)
					closed = true
				}
				return nil
			})
			if err != nil {
				b.Fatal(err)
			}
			select {
			case <-done:
			case <-time.After(5 * time.Minute):
				b.Fatal("consumer did not finish")
			}
			total += time.Since(start)
			c.Stop()
		}
		b.ReportMetric(float64(n*consumeEvents)/total.Seconds(), "events/s")
	})
	b.Run("bare", func(b *testing.B) {
		b.ReportAllocs()
		var total time.Duration
		n := 0
		for b.Loop() {
			n++
			// A fresh durable each time: delete the bare one first.
			bus.JetStream().DeleteConsumer(ctx, bus.Options().Stream, "bench-bare")
			start := time.Now()
			res, err := bare.Consume(ctx, bus.JetStream(), bus.Options().Stream, bus.Options().Subject, consumeEvents, 1000, nil)
			if err != nil {
				b.Fatal(err)
			}
			if res.Bad > 0 {
				b.Fatalf("%d bad events", res.Bad)
			}
			total += time.Since(start)
		}
		b.ReportMetric(float64(n*consumeEvents)/total.Seconds(), "events/s")
	})
}
