package stream

import (
	"errors"

	"github.com/prometheus/client_golang/prometheus"
)

// busMetrics are the bus's own counters. Decoding and rejection counts belong
// to whoever decodes (the service counts events_rejected); these say what the
// transport did.
type busMetrics struct {
	published       prometheus.Counter
	publishFailures prometheus.Counter
	deadLetters     prometheus.Counter
	delivered       prometheus.Counter
	redelivered     prometheus.Counter
	fetchErrors     prometheus.Counter
	recreations     prometheus.Counter
	reconnects      prometheus.Counter
}

func newBusMetrics(reg prometheus.Registerer) *busMetrics {
	c := func(name, help string) prometheus.Counter {
		return register(reg, prometheus.NewCounter(prometheus.CounterOpts{Name: name, Help: help}))
	}
	return &busMetrics{
		published:       c("waymark_bus_published_messages_total", "Messages published to JetStream and acknowledged by it."),
		publishFailures: c("waymark_bus_publish_failures_total", "Publishes that failed or were not acknowledged in time."),
		deadLetters:     c("waymark_bus_dead_letters_total", "Messages copied to the dead-letter subject."),
		delivered:       c("waymark_bus_delivered_messages_total", "Messages handed to a consumer handler."),
		redelivered:     c("waymark_bus_redelivered_skipped_total", "Redeliveries of messages a handler had already been given, dropped."),
		fetchErrors:     c("waymark_bus_fetch_errors_total", "Fetches that failed and attempts to re-create a consumer that failed."),
		recreations:     c("waymark_bus_consumer_recreations_total", "Times a consumer was re-created after an error or a gap in delivery."),
		reconnects:      c("waymark_bus_reconnects_total", "Reconnections to the NATS server."),
	}
}

// register registers c on reg, reusing an identical collector registered
// earlier (two buses in one process share counters). A nil reg registers
// nothing and the counter still works.
func register[C prometheus.Collector](reg prometheus.Registerer, c C) C {
	if reg == nil {
		return c
	}
	if err := reg.Register(c); err != nil {
		var are prometheus.AlreadyRegisteredError
		if errors.As(err, &are) {
			if existing, ok := are.ExistingCollector.(C); ok {
				return existing
			}
		}
		// A conflicting registration is a programming error in the wiring;
		// keep the component working with unregistered counters rather than
		// failing at runtime.
	}
	return c
}
