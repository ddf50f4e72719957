package session

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"sync"
	"sync/atomic"
	"syscall"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"waymark/models"
	"waymark/store"
	"waymark/stream"
)

// EngineOptions configures an [Engine].
type EngineOptions struct {
	Pipeline PipelineOptions
	// Blend is the spec of the blend that answers queries (default
	// "blend"). It is built alongside Pipeline.Models.
	Blend string
	// ExploreShare is the share of all answered slots that explore fresh
	// items (default models.DefaultExploreShare, 10 %), at most one per
	// answer and never the first (see models.Fresh.Explore); 0 turns
	// exploration and the fresh flags off.
	ExploreShare float64
	// Fresh is the spec of the exploration model (default "fresh").
	Fresh string
	// ExploreSeed seeds the exploration draws, which are a function of the
	// seed and the answer's request id (models.ExploreRand).
	ExploreSeed uint64
	// RequestPrefix starts every request id ("<prefix>-<counter>"). Empty
	// (the default) draws 64 random bits per process, so ids, and the
	// draws seeded by them, never repeat across restarts or replicas; a
	// fixed prefix makes both reproducible (tests, replay).
	RequestPrefix string
	// FlushInterval bounds the time between flushes (default 2s). A flush
	// rewrites every neighbour row changed since the last one, so flushing
	// less often writes less: at 120k events a flush, 2 s at 60k events/s,
	// the commits cost about two thirds of what 1 s flushes cost. A crash
	// replays at most this much; queries see every event when it is applied,
	// whatever the interval.
	FlushInterval time.Duration
	// FlushBytes flushes once the estimated size of the next flush
	// reaches it (default 24 MiB): a flush is one store transaction, and
	// a transaction has a size limit (15 % of the memtable, 38.4 MiB with
	// the default 256 MiB). The estimate counts whole rows at their size
	// when first changed, and runs about 1.5 times the bytes written.
	FlushBytes int
	// FlushEvents flushes after this many applied messages (default 200,000).
	FlushEvents int
	// CatalogSubject is the subject whose messages are catalogue records
	// (default "waymark.catalog"), ControlSubject the one of operator
	// commands (default "waymark.control"); every other subject carries
	// clicks.
	CatalogSubject string
	ControlSubject string
	Logger         *slog.Logger
	Registerer     prometheus.Registerer
}

// DefaultEngineOptions returns serve's defaults.
func DefaultEngineOptions() EngineOptions {
	return EngineOptions{
		Pipeline:       DefaultPipelineOptions(),
		Blend:          models.DefaultBlendSpec,
		ExploreShare:   models.DefaultExploreShare,
		Fresh:          "fresh",
		FlushInterval:  2 * time.Second,
		FlushEvents:    200_000,
		FlushBytes:     24 << 20,
		CatalogSubject: "waymark.catalog",
		ControlSubject: "waymark.control",
	}
}

func (o *EngineOptions) validate() error {
	d := DefaultEngineOptions()
	if o.Blend == "" {
		o.Blend = d.Blend
	}
	if o.FlushInterval == 0 {
		o.FlushInterval = d.FlushInterval
	}
	if o.FlushEvents == 0 {
		o.FlushEvents = d.FlushEvents
	}
	if o.FlushBytes == 0 {
		o.FlushBytes = d.FlushBytes
	}
	if o.CatalogSubject == "" {
		o.CatalogSubject = d.CatalogSubject
	}
	if o.ControlSubject == "" {
		o.ControlSubject = d.ControlSubject
	}
	if o.FlushInterval < time.Millisecond {
		return fmt.Errorf("%w: FlushInterval %s below 1ms", ErrBadOption, o.FlushInterval)
	}
	if o.FlushEvents < 1 {
		return fmt.Errorf("%w: FlushEvents %d below 1", ErrBadOption, o.FlushEvents)
	}
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
	if !(o.ExploreShare >= 0 && o.ExploreShare <= 1) {
		return fmt.Errorf("%w: ExploreShare %g is not from 0 to 1", ErrBadOption, o.ExploreShare)
	}
	if len(o.RequestPrefix) > 64 {
		return fmt.Errorf("%w: RequestPrefix is %d bytes, at most 64", ErrBadOption, len(o.RequestPrefix))
	}
	if o.Fresh == "" {
		o.Fresh = d.Fresh
	}
	// trending answers empty sessions by the request's context.
	need := []string{o.Blend, "trending"}
	if o.ExploreShare > 0 {
		need = append(need, o.Fresh)
	}
	for _, n := range need {
		found := false
		for _, m := range o.Pipeline.Models {
			found = found || m == n
		}
		if !found {
			o.Pipeline.Models = append(append([]string(nil), o.Pipeline.Models...), n)
		}
	}
	return nil
}

// DeadLetterer receives messages the engine rejects.
type DeadLetterer interface {
	DeadLetter(ctx context.Context, data []byte, seq uint64, reason string) error
}

// Engine is the live learner: it applies bus messages to a [Pipeline],
// flushes the state to the store with the stream position in one
// transaction, acknowledges the bus after the commit, and answers queries
// concurrently.
type Engine struct {
	opts  EngineOptions
	log   *slog.Logger
	st    *store.Store
	dlq   DeadLetterer
	met   *metrics
	blend *models.Blend
	iknn  *models.IKNN
	fresh *models.Fresh
	trend *models.Trending
	reqNo atomic.Uint64
	// reqPrefix starts every request id; see EngineOptions.RequestPrefix.
	reqPrefix string

	// mu protects the pipeline's models and dictionary: the consumer
	// goroutine applies under the write lock, queries read under the
	// read lock. The tracker has locks of its own.
	mu sync.RWMutex
	p  *Pipeline

	// flushMu keeps commits and snapshots apart, so a snapshot holds
	// exactly the state its checkpoint describes.
	flushMu sync.Mutex
	// inflight holds a token per flush encoded and not yet committed. Its
	// capacity lets the writer encode and hand off a flush while the
	// previous commit still runs, and stop only when two are behind.
	inflight chan struct{}
	errMu    sync.Mutex
	// commitErr is a failed background commit; guarded by errMu.
	commitErr error

	// Fields below belong to the consumer goroutine.
	cp         store.Checkpoint // counters as of the last applied message
	pending    int              // messages applied since the last flush
	lastMsg    *stream.Msg      // last message applied, acknowledged after the flush
	lastCommit chan struct{}    // closed when the newest commit handed off is done
	lastFlush  time.Time

	// faults are the reasons the state takes no writes now (faults.go).
	faults *faults
	// commit commits a flush; nil is the store's, with a check of free
	// space first. Tests replace it to fail like a full disk.
	commit func(*store.Batch) error

	// Readable from any goroutine.
	applied    atomic.Uint64
	rejected   atomic.Uint64 // click events
	rejCatalog atomic.Uint64
	rejControl atomic.Uint64
	lastSeq    atomic.Uint64
	streamLast atomic.Uint64
	loaded     atomic.Bool
}

// NewEngine builds the models and loads their state from st. dlq may be nil.
func NewEngine(ctx context.Context, st *store.Store, dlq DeadLetterer, opts EngineOptions) (*Engine, error) {
	if err := opts.validate(); err != nil {
		return nil, err
	}
	p, err := NewPipeline(opts.Pipeline)
	if err != nil {
		return nil, err
	}
	p.Tracker.Persist()
	m, _ := p.Set.Get(opts.Blend)
	blend, ok := m.(*models.Blend)
	if !ok {
		return nil, fmt.Errorf("%w: Blend %q is not a blend", ErrBadOption, opts.Blend)
	}
	e := &Engine{opts: opts, log: opts.Logger, st: st, dlq: dlq, p: p, blend: blend, lastFlush: time.Now(),
		inflight: make(chan struct{}, commitsInFlight)}
	if im, err := p.Set.Get("iknn"); err == nil {
		e.iknn, _ = im.(*models.IKNN)
	}
	for _, m := range p.Set.Learners() {
		if t, ok := m.(*models.Trending); ok && e.trend == nil {
			e.trend = t
		}
	}
	if e.reqPrefix = opts.RequestPrefix; e.reqPrefix == "" {
		e.reqPrefix = randomPrefix()
	}
	if opts.ExploreShare > 0 {
		fm, _ := p.Set.Get(opts.Fresh)
		if e.fresh, ok = fm.(*models.Fresh); !ok {
			return nil, fmt.Errorf("%w: Fresh %q is not a fresh-item model", ErrBadOption, opts.Fresh)
		}
	}
	start := time.Now()
	if err := p.Load(ctx, st); err != nil {
		return nil, fmt.Errorf("load state: %w", err)
	}
	e.cp = p.Checkpoint()
	e.publishCounters()
	e.met = newMetrics(opts.Registerer, e)
	e.faults = newFaults(opts.Registerer)
	e.loaded.Store(true)
	e.log.Info("state loaded", "seq", e.cp.Seq, "events_applied", e.cp.Applied,
		"items", p.Dict.Len(), "sessions", p.Tracker.Len(), "took", time.Since(start).Round(time.Millisecond))
	return e, nil
}

// StreamID returns the id of the stream the state was learned from ("" when
// not recorded yet).
func (e *Engine) StreamID() string { return e.cp.Stream }

// SetStreamID records the id of the stream the state learns from; the next
// flush stores it with the checkpoint. Call it before consuming starts.
func (e *Engine) SetStreamID(id string) { e.cp.Stream = id }

// ResumeSeq is the first stream sequence the consumer must deliver.
func (e *Engine) ResumeSeq() uint64 { return e.lastSeq.Load() + 1 }

func (e *Engine) publishCounters() {
	e.applied.Store(e.cp.Applied)
	e.rejected.Store(e.cp.Rejected)
	e.rejCatalog.Store(e.cp.RejectedCatalog)
	e.rejControl.Store(e.cp.RejectedControl)
	e.lastSeq.Store(e.cp.Seq)
}

// applyChunk bounds how many messages are applied under one hold of the
// write lock, so queries wait at most that long.
const applyChunk = 256

// Handle is the consumer's handler: it applies msgs in order, skipping any
// at or below the stored sequence, and flushes when due. An empty msgs is a
// timer tick.
func (e *Engine) Handle(ctx context.Context, msgs []stream.Msg) error {
	for len(msgs) > 0 {
		n := min(len(msgs), applyChunk)
		e.applyLocked(ctx, msgs[:n])
		msgs = msgs[n:]
	}
	if e.pending >= e.opts.FlushEvents || (e.pending > 0 && time.Since(e.lastFlush) >= e.opts.FlushInterval) {
		return e.Flush(ctx)
	}
	if e.pending > 0 && e.p.DirtyBytes() >= e.opts.FlushBytes {
		e.met.sizeFlushes.Inc()
		return e.Flush(ctx)
	}
	return nil
}

type rejection struct {
	data   []byte
	seq    uint64
	kind   string // rejectEvent, rejectCatalog or rejectControl
	reason string
}

// The kinds of rejected messages, the label values of
// waymark_events_rejected_total: a bad catalogue feed or operator tool is
// not a bad click producer, and each has its own counter.
const (
	rejectEvent   = "event"
	rejectCatalog = "catalog"
	rejectControl = "control"
)

func (e *Engine) applyLocked(ctx context.Context, msgs []stream.Msg) {
	var rejects []rejection
	lastIdx := -1
	e.mu.Lock()
	for i := range msgs {
		m := &msgs[i]
		if m.Seq <= e.cp.Seq {
			e.met.skipped.Inc() // redelivered: already in the stored state
			continue
		}
		if err := e.applyOneLocked(m); err != nil {
			kind := rejectEvent
			switch m.Subject {
			case e.opts.ControlSubject:
				kind = rejectControl
				e.cp.RejectedControl++
			case e.opts.CatalogSubject:
				kind = rejectCatalog
				e.cp.RejectedCatalog++
			default:
				e.cp.Rejected++
			}
			rejects = append(rejects, rejection{m.Data, m.Seq, kind, err.Error()})
		}
		e.cp.Seq = m.Seq
		e.pending++
		lastIdx = i
	}
	if lastIdx >= 0 {
		// One copy per chunk, not per message: only the last is acked.
		last := msgs[lastIdx]
		e.lastMsg = &last
	}
	pc := e.p.Checkpoint()
	e.cp.Applied, e.cp.Catalog, e.cp.Overflow = pc.Applied, pc.Catalog, pc.Overflow
	e.mu.Unlock()
	e.publishCounters()
	for _, r := range rejects {
		e.met.rejected.WithLabelValues(r.kind).Inc()
		e.log.Debug("message rejected", "kind", r.kind, "seq", r.seq, "reason", r.reason)
		if e.dlq != nil {
			if err := e.dlq.DeadLetter(ctx, r.data, r.seq, r.reason); err != nil {
				e.log.Warn("dead-letter publish failed", "seq", r.seq, "err", err)
			}
		}
	}
}

func (e *Engine) applyOneLocked(m *stream.Msg) error {
	switch m.Subject {
	case e.opts.ControlSubject:
		c, err := stream.DecodeControl(m.Data)
		if err != nil {
			return err
		}
		if c.Forget != "" {
			e.p.Forget(c.Forget)
			e.log.Info("forgot a session", "seq", m.Seq)
		}
		if c.Served != nil {
			e.p.Served(c.Served.Session, c.Served.Items, c.Served.TS)
		}
		for _, sv := range c.ServedBatch {
			e.p.Served(sv.Session, sv.Items, sv.TS)
		}
		if c.Prior != nil {
			e.p.ApplyPrior(c.Prior)
		}
		return nil
	case e.opts.CatalogSubject:
		rec, err := stream.DecodeItemJSON(m.Data)
		if err != nil {
			return err
		}
		e.p.ApplyItem(&rec, 0)
		return nil
	}
	ev, err := stream.DecodeJSON(m.Data)
	if err != nil {
		return err
	}
	ev.Seq = m.Seq
	e.p.Apply(&ev)
	e.met.applied.Inc()
	return nil
}

// commitsInFlight bounds the flushes encoded and not yet committed: one
// committing and one waiting for it. The writer goes on learning meanwhile,
// and blocks only when both slots are taken. More slots would only hold
// more encoded batches in memory: commits run one at a time.
const commitsInFlight = 2

// Flush encodes everything applied since the last flush, with the stream
// position, and commits it in one transaction in the background; the bus is
// acknowledged once the commit is durable. Commits run one at a time and in
// order. Flush waits only when two earlier flushes are not committed yet;
// a snapshot or Sync waits for every commit handed off. A failed commit is
// returned by the next call, which stops the consumer, and no later flush
// is committed after it.
func (e *Engine) Flush(ctx context.Context) error {
	if err := e.failed(); err != nil {
		return err
	}
	if e.pending == 0 {
		return nil
	}
	e.inflight <- struct{}{}
	start := time.Now()
	if err := e.failed(); err != nil {
		<-e.inflight
		return err
	}
	cp := e.cp
	b := new(store.Batch)
	// Encoding reads model state and clears dirty marks, both owned by
	// this goroutine; queries only read, so a read lock suffices. Every
	// Flush encodes into fresh buffers, so a batch still waiting for its
	// commit is not touched by the next encode.
	e.mu.RLock()
	pc := e.p.Checkpoint()
	cp.DecayRef, cp.Watermark, cp.Sessions, cp.Touches = pc.DecayRef, pc.Watermark, pc.Sessions, pc.Touches
	err := e.p.Flush(b, cp)
	e.mu.RUnlock()
	if err != nil {
		<-e.inflight
		return fmt.Errorf("encode flush at seq %d: %w", cp.Seq, err)
	}
	encoded := time.Since(start)
	last := e.lastMsg
	e.pending, e.lastMsg, e.lastFlush = 0, nil, time.Now()
	e.met.flushBytes.Observe(float64(b.Bytes()))
	prev, done := e.lastCommit, make(chan struct{})
	e.lastCommit = done
	go func() {
		defer func() {
			close(done)
			<-e.inflight
		}()
		if prev != nil {
			<-prev
		}
		e.flushMu.Lock()
		defer e.flushMu.Unlock()
		// The metric is encode plus commit, without the wait for the
		// commits before this one, so it keeps meaning what one flush costs.
		turn := time.Now()
		if e.failed() != nil {
			// An earlier commit failed: this batch holds only what
			// changed after it, so committing it would store a state
			// that never existed.
			return
		}
		if err := e.commitRetrying(b); err != nil {
			e.errMu.Lock()
			e.commitErr = fmt.Errorf("flush at seq %d: %w", cp.Seq, err)
			e.errMu.Unlock()
			return
		}
		e.met.flushSeconds.Observe((encoded + time.Since(turn)).Seconds())
		if last != nil {
			if err := last.AckAll(); err != nil && !errors.Is(err, stream.ErrNoAck) {
				// The state is committed; a lost ack only means
				// redelivery, which the sequence check skips.
				e.log.Debug("ack failed", "seq", cp.Seq, "err", err)
			}
		}
	}()
	return nil
}

// noSpaceRetry is how often a commit the disk had no room for is tried
// again.
const noSpaceRetry = time.Second

// commitRetrying commits b. A full disk (ENOSPC, or less free space than
// the commit needs) is not an error that stops the service: the engine
// reports the no_space fault, the commits behind this one wait, and so the
// consumer stops fetching once two flushes are pending; queries go on from
// memory. The same batch, an exact state, is tried again until it fits, so
// consuming resumes exactly where it paused.
func (e *Engine) commitRetrying(b *store.Batch) error {
	commit := e.commit
	if commit == nil {
		commit = func(b *store.Batch) error {
			if err := e.st.CheckSpace(b); err != nil {
				return err
			}
			return e.st.CommitBatch(b)
		}
	}
	for {
		err := commit(b)
		if err == nil {
			e.ClearFault(FaultNoSpace)
			return nil
		}
		if !errors.Is(err, syscall.ENOSPC) {
			return err
		}
		e.SetFault(FaultNoSpace, "no space left on the store's disk: consuming is paused and queries are answered from memory until space is freed ("+err.Error()+")")
		time.Sleep(noSpaceRetry)
	}
}

func (e *Engine) failed() error {
	e.errMu.Lock()
	defer e.errMu.Unlock()
	return e.commitErr
}

// Sync flushes and waits until everything applied is committed.
func (e *Engine) Sync(ctx context.Context) error {
	if err := e.Flush(ctx); err != nil {
		return err
	}
	if e.lastCommit != nil {
		select {
		case <-e.lastCommit:
		case <-ctx.Done():
			return fmt.Errorf("sync: %w", ctx.Err())
		}
	}
	return e.failed()
}

// Snapshot hands put a consistent snapshot of the stored state and the
// stream sequence it includes. Flushes wait until put returns.
func (e *Engine) Snapshot(put func(seq uint64, r io.Reader) error) error {
	e.flushMu.Lock()
	defer e.flushMu.Unlock()
	cp, err := e.st.Checkpoint()
	if err != nil {
		return err
	}
	pr, pw := io.Pipe()
	done := make(chan error, 1)
	go func() {
		err := e.st.Backup(pw)
		pw.CloseWithError(err)
		done <- err
	}()
	perr := put(cp.Seq, pr)
	pr.CloseWithError(errors.New("snapshot reader closed"))
	if berr := <-done; berr != nil && perr == nil {
		return berr
	}
	return perr
}

// ExportPriors writes every item's learned neighbours to f, for
// another deployment to import.
func (e *Engine) ExportPriors(f func(stream.PriorRow) error) error {
	e.mu.RLock()
	defer e.mu.RUnlock()
	return e.p.ExportPriors(f)
}

// SetStreamLast records the stream's last sequence, for lag and readiness.
func (e *Engine) SetStreamLast(seq uint64) { e.streamLast.Store(seq) }

// Lag returns how many stream messages are not applied yet.
func (e *Engine) Lag() uint64 {
	last, seq := e.streamLast.Load(), e.lastSeq.Load()
	if last <= seq {
		return 0
	}
	return last - seq
}

// Loaded reports whether the stored state has been loaded.
func (e *Engine) Loaded() bool { return e.loaded.Load() }

// Stats is a snapshot of the engine's counters.
type Stats struct {
	EventsApplied  uint64   `json:"events_applied"`
	EventsRejected uint64   `json:"events_rejected"`
	CatalogApplied uint64   `json:"catalog_applied"`
	ItemsOverflow  uint64   `json:"items_overflow"`
	LastSequence   uint64   `json:"last_sequence"`
	StreamLast     uint64   `json:"stream_last_sequence"`
	Lag            uint64   `json:"consumer_lag"`
	Items          int      `json:"items"`
	SessionsActive int      `json:"sessions_active"`
	Watermark      string   `json:"event_time_watermark,omitempty"`
	StoreBytes     int64    `json:"store_bytes"`
	Models         []string `json:"models"`
	// Blend is the learned blend's state (chosen mixture, weights, the
	// pool's recent scores); absent for a blend with fixed weights.
	Blend *models.LearnedStats `json:"blend,omitempty"`

	// CatalogRejected and ControlRejected count rejected catalogue
	// records and control messages, apart from click events.
	CatalogRejected uint64 `json:"catalog_rejected"`
	ControlRejected uint64 `json:"control_rejected"`
}

// Stats returns the engine's counters.
func (e *Engine) Stats() Stats {
	e.mu.RLock()
	items := e.p.Dict.Len()
	pc := e.p.Checkpoint()
	wm := pc.Watermark
	keys := append([]string(nil), e.p.Set.Keys()...)
	var learned *models.LearnedStats
	if l := e.blend.Learner(); l != nil {
		ls := l.Stats()
		learned = &ls
	}
	e.mu.RUnlock()
	s := Stats{
		EventsApplied:  e.applied.Load(),
		EventsRejected: e.rejected.Load(),
		CatalogApplied: pc.Catalog,
		ItemsOverflow:  pc.Overflow,
		LastSequence:   e.lastSeq.Load(),
		StreamLast:     e.streamLast.Load(),
		Lag:            e.Lag(),
		Items:          items,
		SessionsActive: e.p.Tracker.Len(),
		StoreBytes:     e.st.Size(),
		Models:         keys,
		Blend:          learned,
	}
	s.CatalogRejected, s.ControlRejected = e.rejCatalog.Load(), e.rejControl.Load()
	if wm > 0 {
		s.Watermark = time.UnixMilli(wm).UTC().Format(time.RFC3339Nano)
	}
	return s
}
