package session

import (
	"cmp"
	"context"
	"crypto/rand"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"sync"
	"time"

	"github.com/nats-io/nats.go/micro"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"

	"waymark/models"
	"waymark/store"
	"waymark/stream"
)

// ServiceOptions configures a whole running service.
type ServiceOptions struct {
	// DataDir holds the store and, with the embedded server, its JetStream
	// files.
	DataDir string
	// HTTPAddr is the HTTP listen address (default 127.0.0.1:8080).
	HTTPAddr string
	// NATSListen is the embedded server's listen address when Bus.URL is
	// empty (default 127.0.0.1:4222).
	NATSListen string
	Bus        stream.BusOptions
	Engine     EngineOptions
	Store      store.Options
	// NATSAuth are the embedded server's access rules; it always requires
	// credentials (a password generated into the data folder unless
	// NATSAuth.Password is set). Without Token, and unless
	// NATSAuth.AnonymousPublish says otherwise, a client without
	// credentials may still publish events and catalogue records, which
	// is what the HTTP API lets anyone do without a token; with Token it
	// is refused.
	NATSAuth stream.ServerAuth
	// ReadyLag is the consumer lag under which /readyz answers ready
	// (default 1000 messages).
	ReadyLag uint64
	// Batch and MaxAckPending tune the consumer (defaults 1000 and 800,000).
	Batch         int
	MaxAckPending int
	// Token, when set, guards write and admin HTTP endpoints.
	Token string
	// Limits bound the HTTP API's connections, timeouts, in-flight
	// requests and batch work (zero fields: DefaultLimits).
	Limits Limits
	// Bootstrap loads the newest snapshot from the NATS object store into
	// an empty data folder before starting, so a new replica replays only
	// what came after the snapshot.
	Bootstrap bool
	// BootstrapFile, when set, loads a snapshot file written by `waymark
	// snapshot --out` (GET /v1/admin/snapshot?to=download) into an empty
	// data folder instead; the stream must still hold what came after it.
	BootstrapFile string
	// RebuildFromStream discards learned state that cannot continue from
	// the events stream (checkpoint ahead of it, a gap, a re-created
	// stream, or a store that reports itself corrupt) and relearns the
	// stream as it is now. State that is consistent with the stream is
	// kept.
	RebuildFromStream bool
	Logger            *slog.Logger
}

// Version is the service version reported to NATS service discovery.
const Version = "0.1.0"

// freshWait bounds how long the consumer waits to fill a batch, and so the
// time from publication to learning when the stream is quiet.
const freshWait = 20 * time.Millisecond

// DefaultServiceOptions returns serve's defaults.
func DefaultServiceOptions() ServiceOptions {
	bus := stream.DefaultBusOptions()
	bus.URL = "" // the embedded server
	return ServiceOptions{
		DataDir:       "waymark-data",
		HTTPAddr:      "127.0.0.1:8080",
		NATSListen:    "127.0.0.1:4222",
		NATSAuth:      stream.ServerAuth{CredentialsDir: stream.DefaultCredentialsDir()},
		Bus:           bus,
		Engine:        DefaultEngineOptions(),
		Store:         store.DefaultOptions(),
		ReadyLag:      1000,
		Batch:         1000,
		MaxAckPending: 800_000,
		Limits:        DefaultLimits(),
	}
}

// Service is a running waymark: store, bus (embedded or remote), engine,
// consumer and HTTP API.
type Service struct {
	opts     ServiceOptions
	log      *slog.Logger
	reg      *prometheus.Registry
	st       *store.Store
	ns       *stream.Server
	bus      *stream.Bus
	api      *Server
	eng      *Engine
	cons     *stream.Consumer
	micro    micro.Service
	http     *http.Server
	httpAddr string
	wg       sync.WaitGroup
	stop     context.CancelFunc
	errc     chan error
	// streamID is the events stream's id (creation time) at start.
	streamID string
}

// Open starts every part. On error, whatever started is stopped again.
func Open(ctx context.Context, opts ServiceOptions) (_ *Service, err error) {
	d := DefaultServiceOptions()
	if opts.DataDir == "" {
		return nil, fmt.Errorf("%w: DataDir is empty", ErrBadOption)
	}
	if opts.HTTPAddr == "" {
		opts.HTTPAddr = d.HTTPAddr
	}
	if opts.NATSListen == "" {
		opts.NATSListen = d.NATSListen
	}
	if opts.ReadyLag == 0 {
		opts.ReadyLag = d.ReadyLag
	}
	if opts.Batch == 0 {
		opts.Batch = d.Batch
	}
	if opts.MaxAckPending == 0 {
		opts.MaxAckPending = d.MaxAckPending
	}
	if opts.Logger == nil {
		opts.Logger = slog.New(slog.DiscardHandler)
	}
	sz, err := opts.Store.Sizing()
	if err != nil {
		return nil, fmt.Errorf("%w: %w", ErrBadOption, err)
	}
	if opts.Engine.FlushBytes == 0 {
		// The estimate runs above the bytes written; 10 % of the memtable
		// keeps a flush well inside Badger's transaction limit (15 %).
		opts.Engine.FlushBytes = int(min(int64(DefaultEngineOptions().FlushBytes), sz.MemTableSize/10))
	}
	if lim := opts.MaxAckPending / (commitsInFlight + 1); opts.Engine.FlushEvents == 0 || opts.Engine.FlushEvents > lim {
		// Acks wait for commits, and up to commitsInFlight flushes wait
		// for theirs while the next one fills: flush well before the
		// server stops delivering for want of acks.
		opts.Engine.FlushEvents = min(DefaultEngineOptions().FlushEvents, lim)
	}
	if err := checkEngineOptions(opts.Engine); err != nil {
		return nil, err
	}
	if opts.BootstrapFile != "" {
		if _, err := os.Stat(opts.BootstrapFile); err != nil {
			return nil, fmt.Errorf("%w: BootstrapFile: %w", ErrBadOption, err)
		}
	}
	s := &Service{opts: opts, log: opts.Logger, reg: prometheus.NewRegistry(), errc: make(chan error, 4)}
	defer func() {
		if err != nil {
			s.Shutdown(context.Background())
		}
	}()
	s.reg.MustRegister(collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}),
		prometheus.NewGaugeFunc(prometheus.GaugeOpts{
			Name: "waymark_memory_budget_bytes", Help: "The memory budget the store and the Go heap are sized to (--memory-budget).",
		}, func() float64 { return float64(sz.Budget) }),
		prometheus.NewGaugeFunc(prometheus.GaugeOpts{
			Name: "waymark_ready", Help: "1 when /readyz answers ready: state loaded, consumer running, lag under the threshold.",
		}, func() float64 {
			if s.eng == nil || s.cons == nil {
				return 0
			}
			if ok, _ := s.ready(); ok {
				return 1
			}
			return 0
		}))
	if err := os.MkdirAll(opts.DataDir, 0o755); err != nil {
		return nil, fmt.Errorf("data folder: %w", err)
	}
	so := opts.Store
	so.Logger, so.Registerer = opts.Logger, s.reg
	var damaged error
	if s.st, damaged, err = s.openStore(ctx, so); err != nil {
		return nil, err
	}
	bo := opts.Bus
	bo.Logger, bo.Registerer = opts.Logger, s.reg
	if bo.URL == "" {
		auth := opts.NATSAuth
		if auth.AnonymousPublish == nil && opts.Token == "" {
			d := stream.DefaultBusOptions()
			auth.AnonymousPublish = []string{cmp.Or(bo.Subject, d.Subject), cmp.Or(bo.CatalogSubject, d.CatalogSubject)}
		}
		s.ns, err = stream.StartServer(ctx, stream.ServerOptions{Dir: filepath.Join(opts.DataDir, "nats"), Listen: opts.NATSListen, Logger: opts.Logger, Auth: &auth})
		if err != nil {
			return nil, fmt.Errorf("embedded NATS server: %w", err)
		}
		bo = s.ns.ClientOptions(bo)
		s.log.Info("embedded NATS server started", "url", bo.URL)
	}
	if s.bus, err = stream.Connect(ctx, bo); err != nil {
		return nil, err
	}
	if err := s.bus.EnsureStreams(ctx); err != nil {
		return nil, err
	}
	if damaged != nil {
		if s.st, err = s.rebuildDamaged(ctx, so, damaged); err != nil {
			return nil, err
		}
	}
	if opts.Bootstrap || opts.BootstrapFile != "" {
		if err := s.bootstrap(ctx); err != nil {
			return nil, err
		}
	}
	fault, why, err := s.checkStart(ctx)
	if err != nil {
		return nil, err
	}
	eo := opts.Engine
	eo.Logger, eo.Registerer = opts.Logger, s.reg
	eo.CatalogSubject = s.bus.Options().CatalogSubject
	eo.ControlSubject = s.bus.Options().ControlSubject
	if s.eng, err = NewEngine(ctx, s.st, s.bus, eo); err != nil {
		// Damage found while loading: relearn when allowed. The
		// engine registers no metrics before its state has loaded.
		if !errors.Is(err, store.ErrCorrupt) && !errors.Is(err, models.ErrCorrupt) {
			return nil, err
		}
		if err := s.canRebuild(ctx, err); err != nil {
			return nil, err
		}
		if err := s.st.Wipe(); err != nil {
			return nil, err
		}
		fault = ""
		if s.eng, err = NewEngine(ctx, s.st, s.bus, eo); err != nil {
			return nil, err
		}
	}
	if s.eng.StreamID() == "" {
		s.eng.SetStreamID(s.streamID)
	}
	replica, err := s.st.ReplicaID(newReplicaID)
	if err != nil {
		return nil, err
	}
	runCtx, cancel := context.WithCancel(context.Background())
	s.stop = cancel
	if fault != "" {
		// Nothing is consumed: the HTTP API still answers queries from
		// the state as loaded, and refuses readiness and writes.
		s.eng.SetFault(fault, why)
	} else if err := s.startConsumer(runCtx, replica); err != nil {
		return nil, err
	}
	s.wg.Add(1)
	go s.pollStream(runCtx)
	srv := NewServer(s.eng, busPublisher{s.bus}, ServerOptions{
		Ready: s.ready, Gatherer: s.reg, Registerer: s.reg, Logger: opts.Logger, Token: opts.Token,
		Snapshot: s.Snapshot, Limits: opts.Limits,
	})
	s.api = srv
	if s.micro, err = srv.AddNATSService(s.bus.Conn(), Version); err != nil {
		return nil, err
	}
	ln, err := net.Listen("tcp", opts.HTTPAddr)
	if err != nil {
		return nil, fmt.Errorf("listen %s: %w", opts.HTTPAddr, err)
	}
	s.httpAddr = ln.Addr().String()
	ln = limitListen(ln, srv.opts.Limits.MaxConns, s.reg)
	s.http = newHTTPServer(srv, srv.opts.Limits, opts.Logger)
	s.wg.Add(1)
	go func() {
		defer s.wg.Done()
		if err := s.http.Serve(ln); err != nil && !errors.Is(err, http.ErrServerClosed) {
			s.errc <- fmt.Errorf("http: %w", err)
		}
	}()
	s.log.Info("serving", "http", s.httpAddr, "nats", bo.URL, "consumer", "waymark-"+replica, "resume_seq", s.eng.ResumeSeq())
	return s, nil
}

// startConsumer starts consuming after the engine's checkpoint.
func (s *Service) startConsumer(runCtx context.Context, replica string) error {
	var err error
	s.cons, err = s.bus.Consume(runCtx, stream.ConsumerOptions{
		Name:          "waymark-" + replica,
		StartSeq:      s.eng.ResumeSeq(),
		Batch:         s.opts.Batch,
		MaxAckPending: s.opts.MaxAckPending,
		// A fetch returns when its batch is full or after MaxWait; below
		// Batch/MaxWait events a second, that wait is the delay between
		// an event's publication and its use in answers. Under load the
		// batches fill first and the wait does not matter.
		MaxWait: freshWait,
	}, s.eng.Handle)
	if err != nil {
		return fmt.Errorf("start consumer: %w", err)
	}
	s.wg.Add(1)
	go func() {
		defer s.wg.Done()
		select {
		case <-s.cons.Closed():
			if err := s.cons.Err(); err != nil {
				s.errc <- fmt.Errorf("consumer: %w", err)
			}
		case <-runCtx.Done():
		}
	}()
	return nil
}

// bootstrap restores the newest snapshot into an empty store.
func (s *Service) bootstrap(ctx context.Context) error {
	cp, err := s.st.Checkpoint()
	if err != nil {
		return err
	}
	if cp.Seq > 0 {
		s.log.Info("bootstrap skipped: the data folder already holds state", "seq", cp.Seq)
		return nil
	}
	if s.opts.BootstrapFile != "" {
		return s.bootstrapFile(ctx, s.opts.BootstrapFile)
	}
	list, err := s.bus.Snapshots(ctx)
	if err != nil {
		return fmt.Errorf("bootstrap: %w", err)
	}
	// Newest first; a snapshot that fails its checksum or does not
	// restore is skipped for the next (a damaged or planted object).
	for _, info := range list {
		start := time.Now()
		if err := s.restoreSnapshot(ctx, info); err != nil {
			s.log.Warn("bootstrap: snapshot skipped", "snapshot", info.Name, "seq", info.Seq, "err", err)
			if werr := s.st.Wipe(); werr != nil {
				return fmt.Errorf("bootstrap: clear a failed restore: %w", werr)
			}
			continue
		}
		s.log.Info("bootstrapped from snapshot", "snapshot", info.Name, "seq", info.Seq, "bytes", info.Bytes, "took", time.Since(start).Round(time.Millisecond))
		return nil
	}
	s.log.Warn("bootstrap: no usable snapshot in the object store; replaying the whole stream", "snapshots", len(list))
	return nil
}

// restoreSnapshot restores one snapshot after checking its SHA-256: the
// snapshot is spooled to a file in the data folder while hashed, so
// nothing unverified reaches the store; the restored checkpoint must be
// at the snapshot's sequence.
func (s *Service) restoreSnapshot(ctx context.Context, info stream.SnapshotInfo) error {
	if len(info.SHA256) != 64 {
		return errors.New("no checksum recorded")
	}
	r, err := s.bus.OpenSnapshot(ctx, info.Name)
	if err != nil {
		return err
	}
	defer r.Close()
	f, err := os.CreateTemp(s.opts.DataDir, "snapshot-*.tmp")
	if err != nil {
		return err
	}
	defer func() {
		f.Close()
		os.Remove(f.Name())
	}()
	h := sha256.New()
	if _, err := io.Copy(io.MultiWriter(f, h), r); err != nil {
		return fmt.Errorf("download: %w", err)
	}
	if got := hex.EncodeToString(h.Sum(nil)); got != info.SHA256 {
		return fmt.Errorf("checksum mismatch: recorded %s, content %s", info.SHA256, got)
	}
	if _, err := f.Seek(0, io.SeekStart); err != nil {
		return err
	}
	if err := s.st.Restore(ctx, f); err != nil {
		return err
	}
	cp, err := s.st.Checkpoint()
	if err != nil {
		return err
	}
	if cp.Seq != info.Seq {
		return fmt.Errorf("%w: restored checkpoint at sequence %d, snapshot named for %d", store.ErrCorrupt, cp.Seq, info.Seq)
	}
	return nil
}

// bootstrapFile restores a snapshot file into the empty store.
func (s *Service) bootstrapFile(ctx context.Context, path string) error {
	f, err := os.Open(path)
	if err != nil {
		return fmt.Errorf("bootstrap: %w", err)
	}
	defer f.Close()
	start := time.Now()
	if err := s.st.Restore(ctx, f); err != nil {
		return fmt.Errorf("bootstrap from %s: %w", path, err)
	}
	cp, err := s.st.Checkpoint()
	if err != nil {
		return err
	}
	s.log.Info("bootstrapped from snapshot file", "file", path, "seq", cp.Seq, "took", time.Since(start).Round(time.Millisecond))
	return nil
}

// Snapshot writes a consistent snapshot of the store to the NATS object
// store, where replicas started with Bootstrap find it.
func (s *Service) Snapshot(ctx context.Context) (stream.SnapshotInfo, error) {
	var info stream.SnapshotInfo
	err := s.eng.Snapshot(func(seq uint64, r io.Reader) error {
		var err error
		info, err = s.bus.PutSnapshot(ctx, seq, r)
		return err
	})
	return info, err
}

func newReplicaID() string {
	var b [6]byte
	_, _ = rand.Read(b[:])
	return hex.EncodeToString(b[:])
}

// pollStream keeps the stream's last sequence fresh for lag and readiness,
// and stops consuming when the stream stops matching the state (it was
// re-created, or dropped messages not yet applied).
func (s *Service) pollStream(ctx context.Context) {
	defer s.wg.Done()
	t := time.NewTicker(250 * time.Millisecond)
	defer t.Stop()
	stopped := false
	for {
		// The applied sequence is read before the stream: the stream can
		// only have grown since.
		seq := s.eng.lastSeq.Load()
		c, cancel := context.WithTimeout(ctx, 2*time.Second)
		if st, err := s.streamState(c); err == nil {
			s.eng.SetStreamLast(st.last)
			if reason, msg := checkStream(seq, s.streamID, st); reason != "" && s.cons != nil && !stopped {
				s.eng.SetFault(reason, msg)
				s.cons.Stop()
				stopped = true
			}
		}
		cancel()
		select {
		case <-ctx.Done():
			return
		case <-t.C:
		}
	}
}

func (s *Service) ready() (bool, string) {
	if !s.eng.Loaded() {
		return false, "state not loaded"
	}
	if fs := s.eng.Faults(); len(fs) > 0 {
		return false, faultText(fs)
	}
	if s.cons == nil {
		return false, "consumer not started"
	}
	select {
	case <-s.cons.Closed():
		return false, "consumer stopped"
	default:
	}
	if lag := s.eng.Lag(); lag > s.opts.ReadyLag {
		return false, fmt.Sprintf("consumer lag %d above %d", lag, s.opts.ReadyLag)
	}
	return true, ""
}

// HTTPAddr returns the address the HTTP API listens on.
func (s *Service) HTTPAddr() string { return s.httpAddr }

// NATSURL returns the bus URL in use.
func (s *Service) NATSURL() string { return s.bus.Options().URL }

// Engine returns the engine.
func (s *Service) Engine() *Engine { return s.eng }

// Bus returns the bus connection.
func (s *Service) Bus() *stream.Bus { return s.bus }

// Err delivers a fatal error of a running part.
func (s *Service) Err() <-chan error { return s.errc }

// Shutdown stops accepting requests, drains the ones in flight, stops the
// consumer, flushes and checkpoints, then closes the bus, the embedded
// server and the store.
func (s *Service) Shutdown(ctx context.Context) error {
	var errs []error
	if s.http != nil {
		if err := s.http.Shutdown(ctx); err != nil {
			errs = append(errs, fmt.Errorf("http shutdown: %w", err))
		}
	}
	if s.micro != nil {
		_ = s.micro.Stop()
	}
	if s.cons != nil {
		s.cons.Stop()
	}
	if s.stop != nil {
		s.stop()
	}
	s.wg.Wait()
	if s.eng != nil {
		// The consumer has stopped: this goroutine now owns the engine.
		if err := s.eng.Sync(ctx); err != nil {
			errs = append(errs, err)
		}
	}
	if s.bus != nil {
		s.bus.Close()
	}
	if s.ns != nil {
		if err := s.ns.Shutdown(ctx); err != nil {
			errs = append(errs, err)
		}
	}
	if s.st != nil {
		if err := s.st.Close(); err != nil {
			errs = append(errs, err)
		}
	}
	return errors.Join(errs...)
}

// busPublisher publishes HTTP writes to the bus.
type busPublisher struct{ b *stream.Bus }

func (p busPublisher) PublishEvents(ctx context.Context, evs []stream.Event) error {
	return p.b.PublishEvents(ctx, evs)
}

func (p busPublisher) PublishControl(ctx context.Context, c stream.Control) (uint64, error) {
	return p.b.PublishControl(ctx, c)
}

func (p busPublisher) PublishControlAsync(c stream.Control) error {
	return p.b.PublishControlAsync(c)
}

func (p busPublisher) PublishItems(ctx context.Context, recs []stream.ItemRecord) error {
	data := make([][]byte, len(recs))
	for i := range recs {
		data[i] = recs[i].AppendJSON(nil)
	}
	return p.b.PublishRaw(ctx, p.b.Options().CatalogSubject, data)
}
