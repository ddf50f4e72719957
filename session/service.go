package session

import (
	"context"
	"crypto/rand"
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
	// ReadyLag is the consumer lag under which /readyz answers ready
	// (default 1000 messages).
	ReadyLag uint64
	// Batch and MaxAckPending tune the consumer (defaults 1000 and 800,000).
	Batch         int
	MaxAckPending int
	// Token, when set, guards write and admin HTTP endpoints.
	Token string
	// Bootstrap loads the newest snapshot from the NATS object store into
	// an empty data folder before starting, so a new replica replays only
	// what came after the snapshot.
	Bootstrap bool
	Logger    *slog.Logger
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
		Bus:           bus,
		Engine:        DefaultEngineOptions(),
		Store:         store.DefaultOptions(),
		ReadyLag:      1000,
		Batch:         1000,
		MaxAckPending: 800_000,
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
	if s.st, err = store.Open(ctx, filepath.Join(opts.DataDir, "store"), so); err != nil {
		return nil, err
	}
	bo := opts.Bus
	bo.Logger, bo.Registerer = opts.Logger, s.reg
	if bo.URL == "" {
		s.ns, err = stream.StartServer(ctx, stream.ServerOptions{Dir: filepath.Join(opts.DataDir, "nats"), Listen: opts.NATSListen, Logger: opts.Logger})
		if err != nil {
			return nil, fmt.Errorf("embedded NATS server: %w", err)
		}
		bo.URL = s.ns.ClientURL()
		s.log.Info("embedded NATS server started", "url", bo.URL)
	}
	if s.bus, err = stream.Connect(ctx, bo); err != nil {
		return nil, err
	}
	if err := s.bus.EnsureStreams(ctx); err != nil {
		return nil, err
	}
	if opts.Bootstrap {
		if err := s.bootstrap(ctx); err != nil {
			return nil, err
		}
	}
	eo := opts.Engine
	eo.Logger, eo.Registerer = opts.Logger, s.reg
	eo.CatalogSubject = s.bus.Options().CatalogSubject
	eo.ControlSubject = s.bus.Options().ControlSubject
	if s.eng, err = NewEngine(ctx, s.st, s.bus, eo); err != nil {
		return nil, err
	}
	replica, err := s.st.ReplicaID(newReplicaID)
	if err != nil {
		return nil, err
	}
	runCtx, cancel := context.WithCancel(context.Background())
	s.stop = cancel
	s.cons, err = s.bus.Consume(runCtx, stream.ConsumerOptions{
		Name:          "waymark-" + replica,
		StartSeq:      s.eng.ResumeSeq(),
		Batch:         opts.Batch,
		MaxAckPending: opts.MaxAckPending,
		// A fetch returns when its batch is full or after MaxWait; below
		// Batch/MaxWait events a second, that wait is the delay between
		// an event's publication and its use in answers. Under load the
		// batches fill first and the wait does not matter.
		MaxWait: freshWait,
	}, s.eng.Handle)
	if err != nil {
		return nil, fmt.Errorf("start consumer: %w", err)
	}
	s.wg.Add(1)
	go s.pollStream(runCtx)
	srv := NewServer(s.eng, busPublisher{s.bus}, ServerOptions{
		Ready: s.ready, Gatherer: s.reg, Registerer: s.reg, Logger: opts.Logger, Token: opts.Token,
		Snapshot: s.Snapshot,
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
	s.http = &http.Server{Handler: srv, ReadHeaderTimeout: 10 * time.Second}
	s.wg.Add(1)
	go func() {
		defer s.wg.Done()
		if err := s.http.Serve(ln); err != nil && !errors.Is(err, http.ErrServerClosed) {
			s.errc <- fmt.Errorf("http: %w", err)
		}
	}()
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
	s.log.Info("serving", "http", s.httpAddr, "nats", bo.URL, "consumer", "waymark-"+replica, "resume_seq", s.eng.ResumeSeq())
	return s, nil
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
	info, r, err := s.bus.LatestSnapshot(ctx)
	if errors.Is(err, stream.ErrNoSnapshot) {
		s.log.Warn("bootstrap: no snapshot in the object store; replaying the whole stream")
		return nil
	}
	if err != nil {
		return fmt.Errorf("bootstrap: %w", err)
	}
	defer r.Close()
	start := time.Now()
	if err := s.st.Restore(ctx, r); err != nil {
		return fmt.Errorf("bootstrap from %s: %w", info.Name, err)
	}
	s.log.Info("bootstrapped from snapshot", "snapshot", info.Name, "seq", info.Seq, "bytes", info.Bytes, "took", time.Since(start).Round(time.Millisecond))
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

// pollStream keeps the stream's last sequence fresh for lag and readiness.
func (s *Service) pollStream(ctx context.Context) {
	defer s.wg.Done()
	t := time.NewTicker(250 * time.Millisecond)
	defer t.Stop()
	for {
		c, cancel := context.WithTimeout(ctx, 2*time.Second)
		if last, err := s.bus.LastSequence(c); err == nil {
			s.eng.SetStreamLast(last)
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
	if s.api != nil {
		s.api.FlushServed() // before the bus closes
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
