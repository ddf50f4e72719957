package stream

import (
	"context"
	"errors"
	"log/slog"
	"net"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"
	"github.com/prometheus/client_golang/prometheus"
)

// newTestServer starts an embedded server on a random loopback port with its
// store in a temp dir.
func newTestServer(t testing.TB) *Server {
	t.Helper()
	return startTestServer(t, t.TempDir(), "127.0.0.1:-1")
}

func startTestServer(t testing.TB, dir, listen string) *Server {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	s, err := StartServer(ctx, ServerOptions{Dir: dir, Listen: listen})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		defer cancel()
		if err := s.Shutdown(ctx); err != nil {
			t.Errorf("shutdown: %v", err)
		}
	})
	return s
}

// newTestBus connects to url with the default layout and ensures the streams.
func newTestBus(t testing.TB, url string, mod func(*BusOptions)) *Bus {
	t.Helper()
	opts := DefaultBusOptions()
	opts.URL = url
	opts.ReconnectWait = 50 * time.Millisecond
	if mod != nil {
		mod(&opts)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	b, err := Connect(ctx, opts)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(b.Close)
	if err := b.EnsureStreams(ctx); err != nil {
		t.Fatal(err)
	}
	return b
}

// testLogger sends slog output to the test log, shown with -v or on failure.
func testLogger(t testing.TB) *slog.Logger {
	return slog.New(slog.NewTextHandler(testWriter{t}, &slog.HandlerOptions{Level: slog.LevelDebug}))
}

type testWriter struct{ t testing.TB }

func (w testWriter) Write(p []byte) (int, error) {
	w.t.Log(strings.TrimRight(string(p), "\n"))
	return len(p), nil
}

// testEvents are n events of an invented shop: ten clicks per visitor over
// 97 items, one millisecond apart.
func testEvents(n, offset int) []Event {
	evs := make([]Event, n)
	for i := range evs {
		j := i + offset
		evs[i] = Event{
			Session: "v" + strconv.Itoa(j/10),
			Item:    "p" + strconv.Itoa(j%97),
			TS:      1767225600000 + int64(j),
			Kind:    Kind(j % int(numKinds)),
		}
	}
	return evs
}

// collector is a Handler that records what it is given and acks each batch.
type collector struct {
	mu      sync.Mutex // protects everything below
	msgs    []Msg
	empties int
	calls   int
}

func (c *collector) handle(ctx context.Context, msgs []Msg) error {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.calls++
	if len(msgs) == 0 {
		c.empties++
		return nil
	}
	c.msgs = append(c.msgs, msgs...)
	last := msgs[len(msgs)-1]
	if err := last.AckAll(); err != nil {
		return err
	}
	return last.AckAll() // a second ack of the same message is a no-op
}

func (c *collector) count() int {
	c.mu.Lock()
	defer c.mu.Unlock()
	return len(c.msgs)
}

func (c *collector) seqs() []uint64 {
	c.mu.Lock()
	defer c.mu.Unlock()
	out := make([]uint64, len(c.msgs))
	for i, m := range c.msgs {
		out[i] = m.Seq
	}
	return out
}

// counter reads a counter from reg by name (0 when absent). It goes through
// Gather, i.e. what a scrape of /metrics would see.
func counter(t testing.TB, reg *prometheus.Registry, name string) float64 {
	t.Helper()
	mfs, err := reg.Gather()
	if err != nil {
		t.Fatal(err)
	}
	for _, mf := range mfs {
		if mf.GetName() == name && len(mf.GetMetric()) == 1 {
			return mf.GetMetric()[0].GetCounter().GetValue()
		}
	}
	return 0
}

// waitFor polls cond until it holds or the deadline passes.
func waitFor(t testing.TB, timeout time.Duration, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(timeout)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("timed out after %v waiting for %s", timeout, what)
		}
		time.Sleep(5 * time.Millisecond)
	}
}

// waitIdle waits until the handler has been called with an empty batch twice
// more, i.e. the consumer has fetched and found nothing left to deliver.
func waitIdle(t testing.TB, c *collector) {
	t.Helper()
	c.mu.Lock()
	start := c.empties
	c.mu.Unlock()
	waitFor(t, 30*time.Second, "two idle fetches", func() bool {
		c.mu.Lock()
		defer c.mu.Unlock()
		return c.empties >= start+2
	})
}

// checkSeqs asserts that got is exactly from..to in order.
func checkSeqs(t testing.TB, got []uint64, from, to uint64) {
	t.Helper()
	if want := int(to - from + 1); len(got) != want {
		t.Fatalf("received %d messages, want %d (sequences %d..%d)", len(got), want, from, to)
	}
	for i, s := range got {
		if s != from+uint64(i) {
			t.Fatalf("message %d has sequence %d, want %d", i, s, from+uint64(i))
		}
	}
}

func consume(t testing.TB, b *Bus, opts ConsumerOptions, h Handler) *Consumer {
	t.Helper()
	c, err := b.Consume(context.Background(), opts, h)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(c.Stop)
	return c
}

func TestBusIntegration(t *testing.T) {
	srv := newTestServer(t)
	reg := prometheus.NewRegistry()
	b := newTestBus(t, srv.ClientURL(), func(o *BusOptions) { o.Registerer = reg })
	ctx := context.Background()
	const n = 10000
	evs := testEvents(n, 0)

	t.Run("EnsureStreams is idempotent", func(t *testing.T) {
		for range 2 {
			if err := b.EnsureStreams(ctx); err != nil {
				t.Fatal(err)
			}
		}
		s, err := b.JetStream().Stream(ctx, "WAYMARK")
		if err != nil {
			t.Fatal(err)
		}
		cfg := s.CachedInfo().Config
		if cfg.Storage != jetstream.FileStorage || strings.Join(cfg.Subjects, ",") != "waymark.events,waymark.catalog,waymark.control" {
			t.Fatalf("events stream config: storage %v subjects %v", cfg.Storage, cfg.Subjects)
		}
		d, err := b.JetStream().Stream(ctx, "WAYMARK_DEADLETTER")
		if err != nil {
			t.Fatal(err)
		}
		dcfg := d.CachedInfo().Config
		if dcfg.MaxAge != 7*24*time.Hour || dcfg.Retention != jetstream.LimitsPolicy || strings.Join(dcfg.Subjects, ",") != "waymark.deadletter" {
			t.Fatalf("dead-letter stream config: max age %v retention %v subjects %v", dcfg.MaxAge, dcfg.Retention, dcfg.Subjects)
		}
		names := b.JetStream().StreamNames(ctx)
		count := 0
		for range names.Name() {
			count++
		}
		if count != 2 {
			t.Fatalf("%d streams after two EnsureStreams, want 2", count)
		}
	})

	t.Run("PublishEvents", func(t *testing.T) {
		if err := b.PublishEvents(ctx, evs); err != nil {
			t.Fatal(err)
		}
		last, err := b.LastSequence(ctx)
		if err != nil {
			t.Fatal(err)
		}
		if last != n {
			t.Fatalf("LastSequence = %d, want %d", last, n)
		}
		if got := counter(t, reg, "waymark_bus_published_messages_total"); got != n {
			t.Fatalf("published counter %v, want %d", got, n)
		}
	})

	t.Run("from StartSeq 1", func(t *testing.T) {
		var c collector
		cons := consume(t, b, ConsumerOptions{Name: "from-start", StartSeq: 1}, c.handle)
		waitFor(t, 30*time.Second, "10k messages", func() bool { return c.count() >= n })
		cons.Stop()
		checkSeqs(t, c.seqs(), 1, n)
		for i, m := range c.msgs {
			ev, err := DecodeMsg(m)
			if err != nil {
				t.Fatalf("message %d: %v", m.Seq, err)
			}
			want := evs[i]
			want.Seq = uint64(i + 1)
			if ev != want || m.Subject != "waymark.events" {
				t.Fatalf("message %d: %+v on %s, want %+v", m.Seq, ev, m.Subject, want)
			}
		}
		if last := c.msgs[n-1]; last.Pending != 0 || c.msgs[0].Pending != n-1 {
			t.Fatalf("Pending: first %d, last %d; want %d and 0", c.msgs[0].Pending, last.Pending, n-1)
		}
		if cons.LastSeq() != n || cons.Pending() != 0 || cons.Err() != nil {
			t.Fatalf("LastSeq %d Pending %d Err %v", cons.LastSeq(), cons.Pending(), cons.Err())
		}
	})

	t.Run("from StartSeq 5001", func(t *testing.T) {
		var c collector
		consume(t, b, ConsumerOptions{Name: "from-middle", StartSeq: 5001, Batch: 333}, c.handle)
		waitFor(t, 30*time.Second, "5k messages", func() bool { return c.count() >= n-5000 })
		// Idle fetches keep calling the handler with empty batches, which is
		// what lets it flush on a timer.
		waitFor(t, 10*time.Second, "an empty batch", func() bool {
			c.mu.Lock()
			defer c.mu.Unlock()
			return c.empties > 0
		})
		checkSeqs(t, c.seqs(), 5001, n)
	})

	t.Run("existing consumer is replaced", func(t *testing.T) {
		// "from-start" above acknowledged everything; on its own the server
		// would deliver nothing more to it. The caller's StartSeq wins.
		info, err := b.JetStream().Consumer(ctx, "WAYMARK", "from-start")
		if err != nil {
			t.Fatal(err)
		}
		waitFor(t, 10*time.Second, "the acks of the first run", func() bool {
			ci, err := info.Info(ctx)
			return err == nil && ci.AckFloor.Stream == n
		})
		var c collector
		cons := consume(t, b, ConsumerOptions{Name: "from-start", StartSeq: 1}, c.handle)
		waitFor(t, 30*time.Second, "10k messages again", func() bool { return c.count() >= n })
		cons.Stop()
		checkSeqs(t, c.seqs(), 1, n)
	})

	t.Run("two names do not steal", func(t *testing.T) {
		var x, y collector
		consume(t, b, ConsumerOptions{Name: "reader-x", StartSeq: 1, Batch: 500}, x.handle)
		consume(t, b, ConsumerOptions{Name: "reader-y", StartSeq: 0, Batch: 700}, y.handle)
		waitFor(t, 30*time.Second, "both readers", func() bool { return x.count() >= n && y.count() >= n })
		checkSeqs(t, x.seqs(), 1, n)
		checkSeqs(t, y.seqs(), 1, n)
	})

	t.Run("handler error stops the consumer", func(t *testing.T) {
		boom := errors.New("disk full")
		calls := 0
		cons, err := b.Consume(ctx, ConsumerOptions{Name: "failing", Batch: 10}, func(ctx context.Context, msgs []Msg) error {
			calls++
			return boom
		})
		if err != nil {
			t.Fatal(err)
		}
		select {
		case <-cons.Closed():
		case <-time.After(30 * time.Second):
			t.Fatal("consumer did not stop after the handler failed")
		}
		if !errors.Is(cons.Err(), boom) || calls != 1 {
			t.Fatalf("Err() = %v after %d calls, want the handler's error after 1", cons.Err(), calls)
		}
		cons.Stop() // safe after it stopped by itself
	})

	t.Run("DeadLetter", func(t *testing.T) {
		bad := []byte(`{"session":"s1"}`)
		for range 2 { // the second copy is dropped by the message id
			if err := b.DeadLetter(ctx, bad, 42, "item: missing\nor empty"); err != nil {
				t.Fatal(err)
			}
		}
		if err := b.DeadLetter(ctx, []byte("x"), 0, ""); err != nil {
			t.Fatal(err)
		}
		s, err := b.JetStream().Stream(ctx, "WAYMARK_DEADLETTER")
		if err != nil {
			t.Fatal(err)
		}
		if got := s.CachedInfo().State.Msgs; got != 2 {
			t.Fatalf("dead-letter stream has %d messages, want 2", got)
		}
		m, err := s.GetMsg(ctx, 1)
		if err != nil {
			t.Fatal(err)
		}
		if string(m.Data) != string(bad) || m.Subject != "waymark.deadletter" ||
			m.Header.Get(HeaderReason) != "item: missing or empty" || m.Header.Get(HeaderSeq) != "42" {
			t.Fatalf("dead letter: subject %s data %q headers %v", m.Subject, m.Data, m.Header)
		}
		m, err = s.GetMsg(ctx, 2)
		if err != nil {
			t.Fatal(err)
		}
		if m.Header.Get(HeaderReason) != "unspecified" || m.Header.Get(HeaderSeq) != "0" {
			t.Fatalf("second dead letter headers %v", m.Header)
		}
		// Dead letters never reach the events stream.
		if last, _ := b.LastSequence(ctx); last != n {
			t.Fatalf("events stream last sequence %d, want %d", last, n)
		}
	})

	t.Run("PublishRaw to the catalogue subject", func(t *testing.T) {
		rec := ItemRecord{Item: "p1", Attrs: map[string][]string{"category": {"garden", "tools"}}}
		if err := b.PublishRaw(ctx, b.Options().CatalogSubject, [][]byte{rec.AppendJSON(nil)}); err != nil {
			t.Fatal(err)
		}
		var c collector
		consume(t, b, ConsumerOptions{Name: "catalog-only", FilterSubjects: []string{"waymark.catalog"}}, c.handle)
		waitFor(t, 10*time.Second, "the catalogue record", func() bool { return c.count() >= 1 })
		got, err := DecodeItemMsg(c.msgs[0])
		if err != nil {
			t.Fatal(err)
		}
		if got.Item != "p1" || got.Seq != n+1 || c.msgs[0].Subject != "waymark.catalog" {
			t.Fatalf("catalogue record %+v on %s", got, c.msgs[0].Subject)
		}
		if err := b.PublishRaw(ctx, "waymark.*", nil); !errors.Is(err, ErrInvalidOptions) {
			t.Fatalf("PublishRaw to a wildcard: %v", err)
		}
	})

	t.Run("metrics", func(t *testing.T) {
		if got := counter(t, reg, "waymark_bus_consumer_recreations_total"); got != 0 {
			t.Fatalf("%v consumer re-creations in a healthy run, want 0", got)
		}
		if got := counter(t, reg, "waymark_bus_dead_letters_total"); got != 3 {
			t.Fatalf("dead letters counter %v, want 3 (the duplicate is acked, not stored)", got)
		}
		// Each subtest's consumers stop when it ends, so the count is exact:
		// full reads by from-start (twice), reader-x and reader-y, half by
		// from-middle, one batch of 10 to the failing handler, one record.
		if got, want := counter(t, reg, "waymark_bus_delivered_messages_total"), float64(4*n+n/2+10+1); got != want {
			t.Fatalf("delivered counter %v, want %v", got, want)
		}
	})
}

// TestConsumerRecreatedWhenDeleted deletes the consumer behind the loop's
// back; the loop must re-create it after the last sequence it handed over
// and carry on without losing or repeating anything.
func TestConsumerRecreatedWhenDeleted(t *testing.T) {
	srv := newTestServer(t)
	reg := prometheus.NewRegistry()
	b := newTestBus(t, srv.ClientURL(), func(o *BusOptions) { o.Registerer = reg })
	ctx := context.Background()
	if err := b.PublishEvents(ctx, testEvents(1000, 0)); err != nil {
		t.Fatal(err)
	}
	var c collector
	consume(t, b, ConsumerOptions{Name: "fragile", Batch: 100}, c.handle)
	waitFor(t, 30*time.Second, "the first 1000", func() bool { return c.count() >= 1000 })
	if err := b.JetStream().DeleteConsumer(ctx, "WAYMARK", "fragile"); err != nil {
		t.Fatal(err)
	}
	waitFor(t, 30*time.Second, "a re-creation", func() bool { return counter(t, reg, "waymark_bus_consumer_recreations_total") >= 1 })
	if err := b.PublishEvents(ctx, testEvents(1000, 1000)); err != nil {
		t.Fatal(err)
	}
	waitFor(t, 30*time.Second, "all 2000", func() bool { return c.count() >= 2000 })
	waitIdle(t, &c)
	checkSeqs(t, c.seqs(), 1, 2000)
}

// TestConsumerSurvivesServerRestart stops the server under a running
// consumer, starts it again on the same port and folder, and publishes more:
// the consumer must deliver every sequence exactly once, in order.
func TestConsumerSurvivesServerRestart(t *testing.T) {
	dir := t.TempDir()
	ctx := context.Background()
	srv, err := StartServer(ctx, ServerOptions{Dir: dir, Listen: "127.0.0.1:-1"})
	if err != nil {
		t.Fatal(err)
	}
	url := srv.ClientURL()
	_, port, _ := net.SplitHostPort(strings.TrimPrefix(url, "nats://"))
	reg := prometheus.NewRegistry()
	b := newTestBus(t, url, func(o *BusOptions) { o.Registerer = reg; o.Logger = testLogger(t) })
	if err := b.PublishEvents(ctx, testEvents(3000, 0)); err != nil {
		t.Fatal(err)
	}
	var c collector
	cons := consume(t, b, ConsumerOptions{Name: "survivor", Batch: 250}, c.handle)
	waitFor(t, 30*time.Second, "the first 3000", func() bool { return c.count() >= 3000 })

	sctx, cancel := context.WithTimeout(ctx, 30*time.Second)
	defer cancel()
	if err := srv.Shutdown(sctx); err != nil {
		t.Fatal(err)
	}
	waitFor(t, 10*time.Second, "the client to notice", func() bool { return !b.Conn().IsConnected() })
	startTestServer(t, dir, "127.0.0.1:"+port)
	waitFor(t, 30*time.Second, "the client to reconnect", func() bool { return b.Conn().IsConnected() })

	pctx, cancel2 := context.WithTimeout(ctx, 30*time.Second)
	defer cancel2()
	if err := b.PublishEvents(pctx, testEvents(2000, 3000)); err != nil {
		t.Fatal(err)
	}
	waitFor(t, 60*time.Second, "all 5000 after the restart", func() bool { return c.count() >= 5000 })
	// A late redelivery would show up as a duplicate: wait until the
	// consumer has come back empty-handed twice more before checking.
	waitIdle(t, &c)
	last, _ := b.LastSequence(ctx)
	if last != 5000 {
		t.Fatalf("stream has %d messages, want 5000", last)
	}
	checkSeqs(t, c.seqs(), 1, 5000)
	t.Logf("after the restart: %v reconnects, %v fetch errors, %v consumer re-creations",
		counter(t, reg, "waymark_bus_reconnects_total"), counter(t, reg, "waymark_bus_fetch_errors_total"),
		counter(t, reg, "waymark_bus_consumer_recreations_total"))
	if counter(t, reg, "waymark_bus_reconnects_total") < 1 {
		t.Fatal("the client never reconnected; the restart was not exercised")
	}
	if cons.Err() != nil {
		t.Fatalf("consumer error: %v", cons.Err())
	}
}

// TestStartBelowFirstSequence purges the start of a stream: a checkpoint
// that points into the purged range starts at the first message left.
func TestStartBelowFirstSequence(t *testing.T) {
	srv := newTestServer(t)
	b := newTestBus(t, srv.ClientURL(), nil)
	ctx := context.Background()
	if err := b.PublishEvents(ctx, testEvents(200, 0)); err != nil {
		t.Fatal(err)
	}
	s, err := b.JetStream().Stream(ctx, "WAYMARK")
	if err != nil {
		t.Fatal(err)
	}
	if err := s.Purge(ctx, jetstream.WithPurgeSequence(101)); err != nil {
		t.Fatal(err)
	}
	var c collector
	consume(t, b, ConsumerOptions{Name: "late", StartSeq: 50}, c.handle)
	waitFor(t, 30*time.Second, "the 100 messages left", func() bool { return c.count() >= 100 })
	checkSeqs(t, c.seqs(), 101, 200)
}

func TestStartServerErrors(t *testing.T) {
	ctx := context.Background()
	if _, err := StartServer(ctx, ServerOptions{}); !errors.Is(err, ErrInvalidOptions) || !strings.Contains(err.Error(), "Dir") {
		t.Fatalf("no Dir: %v", err)
	}
	for _, listen := range []string{"localhost", "127.0.0.1:http", "127.0.0.1:70000"} {
		if _, err := StartServer(ctx, ServerOptions{Dir: t.TempDir(), Listen: listen}); !errors.Is(err, ErrInvalidOptions) || !strings.Contains(err.Error(), "Listen") {
			t.Fatalf("Listen %q: %v", listen, err)
		}
	}
	srv := newTestServer(t)
	busy := strings.TrimPrefix(srv.ClientURL(), "nats://")
	tctx, cancel := context.WithTimeout(ctx, 20*time.Second)
	defer cancel()
	s2, err := StartServer(tctx, ServerOptions{Dir: t.TempDir(), Listen: busy})
	if err == nil {
		s2.Shutdown(ctx)
		t.Fatalf("second server on busy %s started", busy)
	}
	if !strings.Contains(err.Error(), busy) {
		t.Fatalf("error %q does not say where", err)
	}
}

func TestBusOptionsValidate(t *testing.T) {
	tests := []struct {
		field string
		mod   func(*BusOptions)
	}{
		{"Stream", func(o *BusOptions) { o.Stream = "has.dot" }},
		{"Stream", func(o *BusOptions) { o.Stream = "has space" }},
		{"Subject", func(o *BusOptions) { o.Subject = "waymark.*" }},
		{"Subject", func(o *BusOptions) { o.Subject = "a..b" }},
		{"CatalogSubject", func(o *BusOptions) { o.CatalogSubject = o.Subject }},
		{"DeadLetterSubject", func(o *BusOptions) { o.DeadLetterSubject = "waymark.>" }},
		{"TLSCert", func(o *BusOptions) { o.TLSCert = "cert.pem" }},
		{"Replicas", func(o *BusOptions) { o.Replicas = 7 }},
		{"PublishWindow", func(o *BusOptions) { o.PublishWindow = -1 }},
		{"MaxAge", func(o *BusOptions) { o.MaxAge = -time.Second }},
	}
	for _, tt := range tests {
		t.Run(tt.field, func(t *testing.T) {
			o := DefaultBusOptions()
			tt.mod(&o)
			_, err := Connect(context.Background(), o)
			if !errors.Is(err, ErrInvalidOptions) || !strings.Contains(err.Error(), tt.field+":") {
				t.Fatalf("Connect error %v, want ErrInvalidOptions naming %s", err, tt.field)
			}
		})
	}
	if err := DefaultBusOptions().withDefaults().validate(); err != nil {
		t.Fatalf("defaults do not validate: %v", err)
	}
	if err := (BusOptions{}).withDefaults().validate(); err != nil {
		t.Fatalf("zero options with defaults do not validate: %v", err)
	}
}

func TestConsumerOptionsValidate(t *testing.T) {
	srv := newTestServer(t)
	b := newTestBus(t, srv.ClientURL(), nil)
	h := func(context.Context, []Msg) error { return nil }
	tests := []struct {
		field string
		opts  ConsumerOptions
	}{
		{"Name", ConsumerOptions{}},
		{"Name", ConsumerOptions{Name: "a.b"}},
		{"Batch", ConsumerOptions{Name: "a", Batch: -1}},
		{"MaxWait", ConsumerOptions{Name: "a", MaxWait: time.Microsecond}},
		{"MaxAckPending", ConsumerOptions{Name: "a", Batch: 5000, MaxAckPending: 100}},
		{"AckWait", ConsumerOptions{Name: "a", AckWait: time.Millisecond}},
	}
	for _, tt := range tests {
		t.Run(tt.field, func(t *testing.T) {
			_, err := b.Consume(context.Background(), tt.opts, h)
			if !errors.Is(err, ErrInvalidOptions) || !strings.Contains(err.Error(), tt.field+":") {
				t.Fatalf("Consume error %v, want ErrInvalidOptions naming %s", err, tt.field)
			}
		})
	}
	if _, err := b.Consume(context.Background(), ConsumerOptions{Name: "a"}, nil); !errors.Is(err, ErrInvalidOptions) {
		t.Fatalf("nil handler: %v", err)
	}
	// A stream that does not exist is reported, not retried forever.
	other := newTestBus(t, srv.ClientURL(), func(o *BusOptions) {
		o.Stream, o.Subject, o.CatalogSubject, o.ControlSubject, o.DeadLetterSubject = "OTHER", "o.e", "o.c", "o.x", "o.d"
	})
	other.JetStream().DeleteStream(context.Background(), "OTHER")
	if _, err := other.Consume(context.Background(), ConsumerOptions{Name: "a"}, h); !errors.Is(err, jetstream.ErrStreamNotFound) {
		t.Fatalf("missing stream: %v", err)
	}
	other.Close()
	if _, err := other.Consume(context.Background(), ConsumerOptions{Name: "a"}, h); !errors.Is(err, ErrClosed) {
		t.Fatalf("after Close: %v", err)
	}
	if err := other.PublishEvents(context.Background(), testEvents(1, 0)); !errors.Is(err, ErrClosed) {
		t.Fatalf("publish after Close: %v", err)
	}
}

func TestMsgWithoutBus(t *testing.T) {
	if err := (Msg{Seq: 1}).AckAll(); !errors.Is(err, ErrNoAck) {
		t.Fatalf("AckAll on a bare Msg: %v", err)
	}
}

func TestHeaderValue(t *testing.T) {
	long := strings.Repeat("é", maxReasonBytes) // 2 bytes each: must cut on a rune boundary
	tests := map[string]string{
		"plain":         "plain",
		"two\r\nlines":  "two  lines",
		"":              "unspecified",
		"bad \xff byte": "bad \uFFFD byte",
	}
	for in, want := range tests {
		if got := headerValue(in); got != want {
			t.Errorf("headerValue(%q) = %q, want %q", in, got, want)
		}
	}
	if got := headerValue(long); len(got) > maxReasonBytes || !strings.HasPrefix(long, got) || len(got) < maxReasonBytes-1 {
		t.Errorf("long reason cut to %d bytes", len(got))
	}
}
