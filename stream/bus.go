package stream

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"slices"
	"sync"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
)

// Bus is a connection to NATS with JetStream and the waymark stream layout.
// It is safe for concurrent use.
type Bus struct {
	opts    BusOptions
	log     *slog.Logger
	nc      *nats.Conn
	js      jetstream.JetStream
	metrics *busMetrics

	mu        sync.Mutex // protects consumers and closed
	consumers map[*Consumer]struct{}
	closed    bool
}

// Connect validates opts (filling defaults), connects to NATS with reconnects
// forever and opens JetStream. It does not create streams; see EnsureStreams.
func Connect(ctx context.Context, opts BusOptions) (*Bus, error) {
	opts = opts.withDefaults()
	log := opts.Logger
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	opts, credPath, err := opts.withLocalCredentials()
	if err != nil {
		return nil, err
	}
	if credPath != "" {
		log.Info("using the local bus credentials an embedded server recorded", "file", credPath)
	}
	if err := opts.validate(); err != nil {
		return nil, err
	}
	b := &Bus{
		opts:      opts,
		log:       log,
		metrics:   newBusMetrics(opts.Registerer),
		consumers: map[*Consumer]struct{}{},
	}
	nopts := []nats.Option{
		nats.Name(opts.Name),
		nats.MaxReconnects(-1),
		nats.ReconnectWait(opts.ReconnectWait),
		nats.DisconnectErrHandler(func(_ *nats.Conn, err error) {
			if err != nil {
				log.Warn("nats disconnected", "err", err)
			}
		}),
		nats.ReconnectHandler(func(nc *nats.Conn) {
			b.metrics.reconnects.Inc()
			log.Info("nats reconnected", "url", nc.ConnectedUrlRedacted())
		}),
		nats.ErrorHandler(func(_ *nats.Conn, sub *nats.Subscription, err error) {
			subj := ""
			if sub != nil {
				subj = sub.Subject
			}
			log.Warn("nats async error", "subject", subj, "err", err)
		}),
	}
	auth, err := opts.authOptions()
	if err != nil {
		return nil, err
	}
	nopts = append(nopts, auth...)
	if opts.TLSCert != "" {
		nopts = append(nopts, nats.ClientCert(opts.TLSCert, opts.TLSKey))
	}
	if opts.TLSCA != "" {
		nopts = append(nopts, nats.RootCAs(opts.TLSCA))
	}
	if dl, ok := ctx.Deadline(); ok {
		if d := time.Until(dl); d > 0 {
			nopts = append(nopts, nats.Timeout(d))
		}
	}
	if err := ctx.Err(); err != nil {
		return nil, fmt.Errorf("connect to nats: %w", err)
	}
	nc, err := nats.Connect(opts.URL, nopts...)
	if errors.Is(err, nats.ErrAuthorization) && !opts.hasCredentials() {
		return nil, fmt.Errorf("connect to nats %s: %w (the server wants credentials and none were given or recorded for this address in %q)", redactURL(opts.URL), err, opts.CredentialsDir)
	}
	if err != nil {
		return nil, fmt.Errorf("connect to nats %s: %w", redactURL(opts.URL), err)
	}
	// The jetstream-level cap only protects memory; each publish call keeps
	// its own smaller window, so several concurrent callers fit under it.
	js, err := jetstream.New(nc,
		jetstream.WithPublishAsyncMaxPending(4*opts.PublishWindow),
		jetstream.WithPublishAsyncTimeout(opts.AckTimeout),
	)
	if err != nil {
		nc.Close()
		return nil, fmt.Errorf("open jetstream: %w", err)
	}
	b.nc, b.js = nc, js
	log.Info("connected to nats", "url", nc.ConnectedUrlRedacted(), "stream", opts.Stream)
	return b, nil
}

// Conn returns the NATS connection.
func (b *Bus) Conn() *nats.Conn { return b.nc }

// JetStream returns the JetStream handle.
func (b *Bus) JetStream() jetstream.JetStream { return b.js }

// Options returns the options in effect, defaults filled in.
func (b *Bus) Options() BusOptions { return b.opts }

// EnsureStreams creates the events stream and the dead-letter stream, or
// brings existing ones in line with the options. Subjects that someone else
// added to an existing stream are kept. It is idempotent.
func (b *Bus) EnsureStreams(ctx context.Context) error { return b.ensureStreams(ctx, true) }

// CreateStreams creates the streams when they are missing and leaves
// existing ones as they are. Producers (send, priors import) use it, so a
// producer with default options never resets what serve or an operator
// configured, such as replicas or retention.
func (b *Bus) CreateStreams(ctx context.Context) error { return b.ensureStreams(ctx, false) }

func (b *Bus) ensureStreams(ctx context.Context, update bool) error {
	o := b.opts
	events := jetstream.StreamConfig{
		Name:        o.Stream,
		Description: "waymark click events and catalogue records",
		Subjects:    []string{o.Subject, o.CatalogSubject, o.ControlSubject},
		Retention:   jetstream.LimitsPolicy,
		Storage:     jetstream.FileStorage,
		Discard:     jetstream.DiscardOld,
		Replicas:    o.Replicas,
		MaxAge:      o.MaxAge,
		MaxBytes:    maxBytes(o.MaxBytes),
		MaxMsgs:     -1,
	}
	if err := b.ensureStream(ctx, events, update); err != nil {
		return err
	}
	dead := jetstream.StreamConfig{
		Name:        o.DeadLetterStream(),
		Description: "waymark messages rejected by a consumer, with the reason in headers",
		Subjects:    []string{o.DeadLetterSubject},
		Retention:   jetstream.LimitsPolicy,
		Storage:     jetstream.FileStorage,
		Discard:     jetstream.DiscardOld,
		Replicas:    o.Replicas,
		MaxAge:      o.DeadLetterMaxAge,
		MaxBytes:    -1,
		MaxMsgs:     -1,
	}
	return b.ensureStream(ctx, dead, update)
}

func maxBytes(n int64) int64 {
	if n == 0 {
		return -1
	}
	return n
}

func (b *Bus) ensureStream(ctx context.Context, want jetstream.StreamConfig, update bool) error {
	s, err := b.js.Stream(ctx, want.Name)
	if errors.Is(err, jetstream.ErrStreamNotFound) {
		if _, err := b.js.CreateStream(ctx, want); err != nil {
			return fmt.Errorf("create stream %s: %w", want.Name, err)
		}
		b.log.Info("created stream", "stream", want.Name, "subjects", want.Subjects)
		return nil
	}
	if err != nil {
		return fmt.Errorf("look up stream %s: %w", want.Name, err)
	}
	have := s.CachedInfo().Config
	if !update {
		return nil
	}
	if have.Storage != want.Storage {
		return fmt.Errorf("stream %s exists with %s storage; waymark needs %s (delete or rename it)", want.Name, have.Storage, want.Storage)
	}
	cfg := have
	changed := false
	for _, subj := range want.Subjects {
		if !slices.Contains(cfg.Subjects, subj) {
			cfg.Subjects = append(cfg.Subjects, subj)
			changed = true
		}
	}
	if cfg.Replicas != want.Replicas || cfg.MaxAge != want.MaxAge || cfg.MaxBytes != want.MaxBytes {
		cfg.Replicas, cfg.MaxAge, cfg.MaxBytes = want.Replicas, want.MaxAge, want.MaxBytes
		changed = true
	}
	if !changed {
		return nil
	}
	if _, err := b.js.UpdateStream(ctx, cfg); err != nil {
		return fmt.Errorf("update stream %s: %w", want.Name, err)
	}
	b.log.Info("updated stream", "stream", want.Name, "subjects", cfg.Subjects)
	return nil
}

// LastSequence returns the last sequence of the events stream (0 when empty).
func (b *Bus) LastSequence(ctx context.Context) (uint64, error) {
	s, err := b.js.Stream(ctx, b.opts.Stream)
	if err != nil {
		return 0, fmt.Errorf("stream %s info: %w", b.opts.Stream, err)
	}
	return s.CachedInfo().State.LastSeq, nil
}

// Close stops every consumer started on b, waits for them, flushes pending
// acknowledgements and closes the connection. Later calls do nothing.
func (b *Bus) Close() {
	b.mu.Lock()
	if b.closed {
		b.mu.Unlock()
		return
	}
	b.closed = true
	cs := make([]*Consumer, 0, len(b.consumers))
	for c := range b.consumers {
		cs = append(cs, c)
	}
	b.mu.Unlock()
	for _, c := range cs {
		c.Stop()
	}
	if b.nc.IsConnected() {
		_ = b.nc.FlushTimeout(2 * time.Second) // acks are fire-and-forget; give them a chance to leave
	}
	b.nc.Close()
}

func (b *Bus) track(c *Consumer) error {
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.closed {
		return ErrClosed
	}
	b.consumers[c] = struct{}{}
	return nil
}

func (b *Bus) untrack(c *Consumer) {
	b.mu.Lock()
	delete(b.consumers, c)
	b.mu.Unlock()
}

func (b *Bus) isClosed() bool {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.closed
}
