package session

import (
	"fmt"

	"waymark/stream"
)

// payloadLimiter is a Publisher that knows the largest message the bus
// takes (the server's max_payload, headers included).
type payloadLimiter interface {
	MaxPayload() int64
}

// MaxPayload is the NATS server's max_payload for this connection.
func (p busPublisher) MaxPayload() int64 { return p.b.Conn().MaxPayload() }

// fitsBus reports an error when a message of n bytes (headers included)
// exceeds the bus's max_payload. Checked for every record of a write before
// any is published, so one oversized record is rejected on its own line
// instead of failing the request after the records before it went out.
func (s *Server) fitsBus(n int) error {
	pl, ok := s.pub.(payloadLimiter)
	if !ok {
		return nil
	}
	if max := pl.MaxPayload(); max > 0 && int64(n) > max {
		return fmt.Errorf("the record encodes to a %d-byte message, over the bus's max_payload of %d bytes", n, max)
	}
	return nil
}

// msgIDHeaderBytes is what a Nats-Msg-Id header adds to a message: the
// "NATS/1.0\r\n" line, "Nats-Msg-Id: <id>\r\n" and the closing "\r\n"
// (the header block nats.go writes and counts against max_payload).
func msgIDHeaderBytes(id string) int {
	if id == "" {
		return 0
	}
	return len("NATS/1.0\r\n") + len("Nats-Msg-Id: ") + len(id) + len("\r\n") + len("\r\n")
}

// eventMsgBytes is the size of ev's message on the bus. An event's bytes
// are bounded well below any real max_payload, so the exact encoding is
// only computed when a generous bound (every byte escaped to \u00XX) does
// not already fit.
func (s *Server) eventFitsBus(ev *stream.Event) error {
	bound := 6*(len(ev.Session)+len(ev.Item)+len(ev.ID)) + 128 + msgIDHeaderBytes(ev.ID)
	if s.fitsBus(bound) == nil {
		return nil
	}
	return s.fitsBus(len(ev.AppendJSON(nil)) + msgIDHeaderBytes(ev.ID))
}

// itemFitsBus checks a catalogue record's message size.
func (s *Server) itemFitsBus(rec *stream.ItemRecord) error {
	return s.fitsBus(len(rec.AppendJSON(nil)))
}

// published counts and logs a failed publish of n records of kind, and
// returns err.
func (s *Server) published(kind string, n int, err error) error {
	if err != nil {
		s.lim.publishFailure.WithLabelValues(kind).Inc()
		s.opts.Logger.Warn("publish to the bus failed", "kind", kind, "records", n, "err", err)
	}
	return err
}
