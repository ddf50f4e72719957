package session

import (
	"time"

	"github.com/prometheus/client_golang/prometheus"
)

// metrics are the engine's Prometheus series. With a nil registerer they
// still count, unregistered.
type metrics struct {
	applied      prometheus.Counter
	rejected     *prometheus.CounterVec // by kind: event, catalog, control
	skipped      prometheus.Counter
	flushSeconds prometheus.Histogram
	flushBytes   prometheus.Histogram
	sizeFlushes  prometheus.Counter
	query        *prometheus.HistogramVec
}

func newMetrics(reg prometheus.Registerer, e *Engine) *metrics {
	m := &metrics{
		applied: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "waymark_events_applied_total", Help: "Click events applied to the models by this process.",
		}),
		rejected: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "waymark_events_rejected_total", Help: "Bus messages rejected as invalid and dead-lettered, by kind: click events, catalogue records, control messages.",
		}, []string{"kind"}),
		skipped: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "waymark_events_redelivered_total", Help: "Redelivered bus messages skipped because the store already holds them.",
		}),
		flushSeconds: prometheus.NewHistogram(prometheus.HistogramOpts{
			Name: "waymark_flush_seconds", Help: "Time to flush learned state to the store in one transaction.",
			Buckets: prometheus.ExponentialBuckets(0.0005, 2, 15),
		}),
		flushBytes: prometheus.NewHistogram(prometheus.HistogramOpts{
			Name: "waymark_flush_bytes", Help: "Key and value bytes of one flush.",
			Buckets: prometheus.ExponentialBuckets(1024, 4, 10),
		}),
		sizeFlushes: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "waymark_flush_size_triggered_total", Help: "Flushes started early because the next flush neared the store's transaction limit.",
		}),
		query: prometheus.NewHistogramVec(prometheus.HistogramOpts{
			Name: "waymark_query_seconds", Help: "Time to answer a query inside the engine, by endpoint and answering source.",
			Buckets: prometheus.ExponentialBuckets(0.00001, 2, 16),
		}, []string{"endpoint", "source"}),
	}
	for _, k := range []string{rejectEvent, rejectCatalog, rejectControl} {
		m.rejected.WithLabelValues(k) // every kind shows, at 0, from the start
	}
	if reg == nil {
		return m
	}
	gauge := func(name, help string, f func() float64) prometheus.Collector {
		return prometheus.NewGaugeFunc(prometheus.GaugeOpts{Name: name, Help: help}, f)
	}
	reg.MustRegister(m.applied, m.rejected, m.skipped, m.flushSeconds, m.flushBytes, m.sizeFlushes, m.query,
		gauge("waymark_consumer_lag_messages", "Stream messages not yet applied.", func() float64 { return float64(e.Lag()) }),
		gauge("waymark_last_sequence", "Last stream sequence applied.", func() float64 { return float64(e.lastSeq.Load()) }),
		gauge("waymark_sessions_tracked", "Sessions currently tracked.", func() float64 { return float64(e.p.Tracker.Len()) }),
		gauge("waymark_items", "Items in the dictionary.", func() float64 {
			e.mu.RLock()
			defer e.mu.RUnlock()
			return float64(e.p.Dict.Len())
		}),
		gauge("waymark_events_applied_since_creation", "Events applied since the store was created (persisted).", func() float64 { return float64(e.applied.Load()) }),
	)
	return m
}

// observeQuery records one query's latency.
func (m *metrics) observeQuery(endpoint, source string, d time.Duration) {
	if m.query == nil {
		return
	}
	m.query.WithLabelValues(endpoint, source).Observe(d.Seconds())
}
