package session

import (
	"context"
	"errors"
	"fmt"
	"os"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"waymark/bench/synth"
	"waymark/stream"
)

// restartableCluster is a three-node JetStream cluster on loopback whose
// nodes can be stopped and started again on the same folders and ports,
// as an operator restarts a failed NATS server.
type restartableCluster struct {
	t     *testing.T
	opts  []stream.ServerOptions
	nodes []*stream.Server
	urls  []string
}

func startRestartableCluster(t *testing.T) *restartableCluster {
	t.Helper()
	c := &restartableCluster{t: t}
	var routes, clusterAddrs []string
	for i := 0; i < 3; i++ {
		clusterAddrs = append(clusterAddrs, freeAddr(t))
		routes = append(routes, "nats-route://"+clusterAddrs[i])
	}
	for i := 0; i < 3; i++ {
		client := freeAddr(t)
		c.opts = append(c.opts, stream.ServerOptions{
			Dir: t.TempDir(), Listen: client, Name: fmt.Sprintf("n%d", i+1),
			Cluster: &stream.ClusterOptions{Name: "waymark-nodefail", Listen: clusterAddrs[i], Routes: routes},
		})
		c.urls = append(c.urls, "nats://"+client)
	}
	c.nodes = make([]*stream.Server, 3)
	errs := make(chan error, 3)
	for i := range c.nodes {
		go func(i int) { errs <- c.start(i) }(i)
	}
	for range c.nodes {
		if err := <-errs; err != nil {
			t.Fatalf("cluster node: %v", err)
		}
	}
	t.Cleanup(func() {
		for i := range c.nodes {
			c.stop(i)
		}
	})
	bo := c.busOptions()
	waitClusterReady(t, bo)
	return c
}

func (c *restartableCluster) start(i int) error {
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	s, err := stream.StartServer(ctx, c.opts[i])
	c.nodes[i] = s
	return err
}

func (c *restartableCluster) stop(i int) {
	if c.nodes[i] != nil {
		if err := c.nodes[i].Shutdown(context.Background()); err != nil {
			c.t.Errorf("stop node %d: %v", i+1, err)
		}
		c.nodes[i] = nil
	}
}

func (c *restartableCluster) busOptions() stream.BusOptions {
	bo := stream.DefaultBusOptions()
	bo.URL, bo.Replicas = strings.Join(c.urls, ","), 3
	bo.ReconnectWait = 100 * time.Millisecond
	return bo
}

// streamLeader returns the index of the node leading the events stream.
func (c *restartableCluster) streamLeader(ctx context.Context, js jetstream.JetStream) (int, error) {
	st, err := js.Stream(ctx, "WAYMARK")
	if err != nil {
		return -1, err
	}
	info, err := st.Info(ctx)
	if err != nil {
		return -1, err
	}
	if info.Cluster == nil {
		return -1, errors.New("stream info without cluster info")
	}
	for i, o := range c.opts {
		if o.Name == info.Cluster.Leader {
			return i, nil
		}
	}
	return -1, fmt.Errorf("stream leader %q is not a node of the cluster", info.Cluster.Leader)
}

// TestNodeFailureDuringIngest stops NATS nodes of a three-node cluster
// while a producer is publishing, first the stream's leader and then
// another node, and starts each again on its folder. The producer retries
// failed batches; events carry ids, so JetStream's duplicate window makes
// a retry idempotent. The retry path must have run (a node failure that
// never failed a publish tested nothing). At the end the stream must hold
// every event exactly once, and each service replica must have applied
// exactly that many and answer byte for byte like a clean engine fed the
// stream's messages in the stream's order. The events are generated
// (bench/synth, 5000 items), so the test runs without the open datasets.
// WAYMARK_LONG=1 runs 200,000 events instead of 10,000.
func TestNodeFailureDuringIngest(t *testing.T) {
	if testing.Short() {
		t.Skip("starts a three-node cluster and publishes through node failures")
	}
	n := 10_000
	if os.Getenv("WAYMARK_LONG") != "" {
		n = 200_000
	}
	evs := synth.Generate(synth.Options{Events: n, Items: 5000, Concurrent: 100, Seed: 11})
	for i := range evs {
		evs[i].ID = fmt.Sprintf("nf-%d", i)
	}
	cl := startRestartableCluster(t)
	onCluster := func(o *ServiceOptions) {
		o.Bus.URL, o.Bus.Replicas = strings.Join(cl.urls, ","), 3
		o.Bus.ReconnectWait = 100 * time.Millisecond
	}
	a := newTestService(t, t.TempDir(), onCluster)
	defer shutdown(t, a)
	b := newTestService(t, t.TempDir(), onCluster)
	defer shutdown(t, b)

	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Minute)
	defer cancel()
	bo := cl.busOptions()
	bo.Name, bo.AckTimeout = "nodefail-producer", 5*time.Second
	prod, err := stream.Connect(ctx, bo)
	if err != nil {
		t.Fatal(err)
	}
	defer prod.Close()

	// The producer: batches of 500, each retried until JetStream has
	// acknowledged every message of it.
	const batch = 500
	var published, retries atomic.Int64
	done := make(chan error, 1)
	go func() {
		for i := 0; i < len(evs); i += batch {
			part := evs[i:min(i+batch, len(evs))]
			for {
				pctx, pcancel := context.WithTimeout(ctx, 10*time.Second)
				err := prod.PublishEvents(pctx, part)
				pcancel()
				if err == nil {
					break
				}
				if ctx.Err() != nil {
					done <- fmt.Errorf("batch at %d: %w (last error %v)", i, ctx.Err(), err)
					return
				}
				retries.Add(1)
				time.Sleep(100 * time.Millisecond)
			}
			published.Store(int64(i + len(part)))
			time.Sleep(2 * time.Millisecond) // a steady stream, not one burst
		}
		done <- nil
	}()
	waitPublished := func(k int) {
		t.Helper()
		waitFor(t, fmt.Sprintf("%d events published", k), 5*time.Minute, func() bool { return published.Load() >= int64(k) })
	}

	// Round 1: the stream leader fails at a fifth of the stream and comes
	// back at two fifths; round 2: another node fails at three fifths and
	// comes back at four fifths.
	waitPublished(n / 5)
	leader, err := cl.streamLeader(ctx, prod.JetStream())
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("stopping the stream leader n%d at %d published", leader+1, published.Load())
	cl.stop(leader)
	waitPublished(2 * n / 5)
	if err := cl.start(leader); err != nil {
		t.Fatal(err)
	}
	t.Logf("n%d back at %d published", leader+1, published.Load())
	waitPublished(3 * n / 5)
	other := (leader + 1) % 3
	t.Logf("stopping n%d at %d published", other+1, published.Load())
	cl.stop(other)
	waitPublished(4 * n / 5)
	if err := cl.start(other); err != nil {
		t.Fatal(err)
	}
	t.Logf("n%d back at %d published", other+1, published.Load())
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	t.Logf("%d events published with %d batch retries", n, retries.Load())
	if retries.Load() == 0 {
		t.Fatal("no publish failed while nodes were down: the retry path did not run")
	}

	// The log holds every event exactly once.
	var msgs []stream.Msg
	waitFor(t, "the stream to hold every event", 60*time.Second, func() bool {
		last, err := prod.LastSequence(ctx)
		return err == nil && last >= uint64(n)
	})
	if last, err := prod.LastSequence(ctx); err != nil || last != uint64(n) {
		t.Fatalf("stream last sequence %d (%v), want exactly %d", last, err, n)
	}
	msgs = readStream(t, ctx, prod, n)
	seen := make(map[string]bool, n)
	for _, m := range msgs {
		ev, err := stream.DecodeMsg(m)
		if err != nil {
			t.Fatalf("stream message %d: %v", m.Seq, err)
		}
		if seen[ev.ID] {
			t.Fatalf("event %s is in the stream twice (second at seq %d)", ev.ID, m.Seq)
		}
		seen[ev.ID] = true
	}
	if len(seen) != n {
		t.Fatalf("the stream holds %d distinct events, %d were published", len(seen), n)
	}

	// The stream holds exactly n messages, so a replica that has applied
	// through sequence n has seen everything it ever will: a duplicate
	// would show in its count now, with no need to wait for one.
	waitFor(t, "both replicas reach the stream's end", 2*time.Minute, func() bool {
		return a.Engine().Stats().LastSequence == uint64(n) && b.Engine().Stats().LastSequence == uint64(n)
	})

	// Each replica equals a clean engine fed the log in its order.
	clean, _ := cleanEngine(t, msgs)
	probes := scoreProbes(evs, 100)
	compared := 0
	for i, s := range []*Service{a, b} {
		compared = sameAsClean(t, fmt.Sprintf("replica %d", i+1), viaURL(t, "http://"+s.HTTPAddr()), clean, probes)
	}
	t.Logf("stream %d messages; both replicas applied %d and gave %d answers each identical to the clean engine (%d items)",
		len(msgs), n, compared, clean.Stats().Items)
}

// readStream reads the first n messages of the events stream in order.
func readStream(t *testing.T, ctx context.Context, b *stream.Bus, n int) []stream.Msg {
	t.Helper()
	// Right after node restarts a consumer-create request can go
	// unanswered (seen once under heavy load: the test hung for minutes),
	// so each attempt gets its own deadline and a few retries.
	var cons jetstream.Consumer
	var err error
	for attempt := 1; ; attempt++ {
		actx, cancel := context.WithTimeout(ctx, 15*time.Second)
		cons, err = b.JetStream().OrderedConsumer(actx, b.Options().Stream, jetstream.OrderedConsumerConfig{})
		cancel()
		if err == nil {
			break
		}
		if attempt == 8 {
			t.Fatalf("ordered consumer after %d attempts: %v", attempt, err)
		}
		t.Logf("ordered consumer, attempt %d: %v", attempt, err)
	}
	it, err := cons.Messages()
	if err != nil {
		t.Fatal(err)
	}
	defer it.Stop()
	out := make([]stream.Msg, 0, n)
	for len(out) < n {
		m, err := it.Next()
		if err != nil {
			t.Fatalf("read stream after %d: %v", len(out), err)
		}
		md, err := m.Metadata()
		if err != nil {
			t.Fatal(err)
		}
		out = append(out, stream.Msg{Seq: md.Sequence.Stream, Subject: m.Subject(), Data: m.Data()})
	}
	return out
}
