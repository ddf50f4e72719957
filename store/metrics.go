package store

import (
	"github.com/prometheus/client_golang/prometheus"
)

type metrics struct {
	commits       prometheus.Counter
	commitBytes   prometheus.Counter
	commitSeconds prometheus.Histogram
	journaled     prometheus.Counter
}

func newMetrics() *metrics {
	m := &metrics{
		commits: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "waymark_store_commits_total", Help: "Flush transactions committed to the store.",
		}),
		commitBytes: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "waymark_store_written_bytes_total", Help: "Key and value bytes written by flushes.",
		}),
		commitSeconds: prometheus.NewHistogram(prometheus.HistogramOpts{
			Name: "waymark_store_commit_seconds", Help: "Time to build and commit one flush transaction.",
			Buckets: prometheus.ExponentialBuckets(0.0005, 2, 14),
		}),
		journaled: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "waymark_store_journaled_flushes_total", Help: "Flushes too large for one transaction, committed through the journal.",
		}),
	}
	return m
}

// register registers the metrics with reg (nil: none).
func (m *metrics) register(reg prometheus.Registerer, s *Store) {
	if reg != nil {
		size := prometheus.NewGaugeFunc(prometheus.GaugeOpts{
			Name: "waymark_store_size_bytes", Help: "Bytes the store's files take on disk (allocated blocks, as du counts them).",
		}, func() float64 { return float64(s.Size()) })
		reg.MustRegister(m.commits, m.commitBytes, m.commitSeconds, m.journaled, size)
	}
}
