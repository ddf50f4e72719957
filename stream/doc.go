// Package stream carries click events and catalogue records from producers to
// learners: the event type and its codecs, file readers, and the JetStream
// bus with an embedded NATS server.
//
// # Events
//
// An Event is one visitor action (click, view, cart, purchase) on one item in
// one session at one moment of event time. The wire form is one JSON object,
//
//	{"session":"v17","item":"p42","ts":1767225600000,"kind":"view","id":"e-9"}
//
// with "ts" in unix milliseconds or RFC 3339. DecodeJSON parses and validates
// it; AppendJSON writes the canonical form. FORMAT.md in this directory is the
// full specification: fields, limits, validation reasons, CSV, catalogue
// records, subjects and headers.
//
// DecodeJSON sits on the ingest hot path, so the usual shape of a line is
// parsed by a hand-written scanner; anything unusual falls back to
// encoding/json, and the fuzz target FuzzDecodeJSON checks that both always
// agree.
//
// # Files
//
// A Reader yields events in order: NewJSONLinesReader for JSON lines,
// NewCSVReader for CSV with a header, OpenFile to pick by name and unwrap
// gzip. A bad line comes back as a *LineError and reading goes on with the
// next line, so one broken record never stops a replay.
//
// # Bus
//
// Connect opens a Bus on NATS JetStream and EnsureStreams creates the events
// stream (file storage; events and catalogue subjects in one ordered log) and
// the dead-letter stream. PublishEvents and PublishRaw publish asynchronously
// within a bounded window and wait for every acknowledgement.
//
// Consume delivers the stream to a Handler in batches from one goroutine. The
// start sequence is the caller's checkpoint, never the server's consumer
// state: Consume replaces any consumer of the same name, so a fresh data
// folder reads from the first message and two readers with different names
// never take each other's messages. The handler acknowledges with
// Msg.AckAll once what it learned is durable; after a restart the caller
// resumes from its checkpoint and anything redelivered below it is skipped,
// which gives at-least-once delivery with an exactly-once effect.
//
//	bus, err := stream.Connect(ctx, opts)
//	...
//	c, err := bus.Consume(ctx, stream.ConsumerOptions{Name: "waymark-a", StartSeq: checkpoint + 1},
//		func(ctx context.Context, msgs []stream.Msg) error {
//			for _, m := range msgs {
//				ev, err := stream.DecodeMsg(m)
//				if err != nil {
//					// count it, and bus.DeadLetter(ctx, m.Data, m.Seq, err.Error())
//					continue
//				}
//				learn(ev)
//			}
//			return flushAndAckIfDue(ctx, msgs) // commit, then msgs[len(msgs)-1].AckAll()
//		})
//
// StartServer runs an embedded NATS server with JetStream under a data folder,
// the single-command default when no NATS URL is given. With
// ServerOptions.Auth its client port requires credentials (and optionally
// TLS) and records them for local clients in DefaultCredentialsDir, where
// Connect finds them when it is given none.
package stream
