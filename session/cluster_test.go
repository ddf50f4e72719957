package session

import (
	"context"
	"fmt"
	"strings"
	"testing"
	"time"

	"waymark/stream"
)

// startCluster starts three embedded NATS servers clustered on loopback,
// each with JetStream in its own folder, and returns their client URLs.
func startCluster(t *testing.T) ([]*stream.Server, []string) {
	t.Helper()
	var routes, clients, clusterAddrs []string
	for i := 0; i < 3; i++ {
		clients = append(clients, freeAddr(t))
		clusterAddrs = append(clusterAddrs, freeAddr(t))
		routes = append(routes, "nats-route://"+clusterAddrs[i])
	}
	servers := make([]*stream.Server, 3)
	errs := make(chan error, 3)
	for i := range servers {
		go func(i int) {
			ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
			defer cancel()
			s, err := stream.StartServer(ctx, stream.ServerOptions{
				Dir: t.TempDir(), Listen: clients[i], Name: fmt.Sprintf("n%d", i+1),
				Cluster: &stream.ClusterOptions{Name: "waymark-test", Listen: clusterAddrs[i], Routes: routes},
			})
			servers[i] = s
			errs <- err
		}(i)
	}
	for range servers {
		if err := <-errs; err != nil {
			t.Fatalf("cluster node: %v", err)
		}
	}
	t.Cleanup(func() {
		for _, s := range servers {
			if s != nil {
				_ = s.Shutdown(context.Background())
			}
		}
	})
	urls := make([]string, 3)
	for i, s := range servers {
		urls[i] = s.ClientURL()
	}
	// Wait until JetStream has a meta leader and takes an R3 stream.
	bo := stream.DefaultBusOptions()
	bo.URL, bo.Replicas = strings.Join(urls, ","), 3
	waitClusterReady(t, bo)
	return servers, urls
}

// TestScaleOutOnACluster: two replicas on an R=3 stream of a three-node
// cluster give identical answers; with one node stopped ingest and queries
// go on; a third replica bootstrapped from a snapshot converges.
func TestScaleOutOnACluster(t *testing.T) {
	if testing.Short() {
		t.Skip("starts a three-node cluster")
	}
	servers, urls := startCluster(t)
	onCluster := func(o *ServiceOptions) {
		o.Bus.URL, o.Bus.Replicas = strings.Join(urls, ","), 3
	}
	a := newTestService(t, t.TempDir(), onCluster)
	defer shutdown(t, a)
	b := newTestService(t, t.TempDir(), onCluster)
	defer shutdown(t, b)

	doJSON(t, "POST", "http://"+a.HTTPAddr()+"/v1/events", workedEvents(), nil)
	both := func(n uint64) func() bool {
		return func() bool { return a.Engine().Stats().EventsApplied == n && b.Engine().Stats().EventsApplied == n }
	}
	waitFor(t, "both replicas apply 171 events", 30*time.Second, both(171))
	same := func(rs ...*Service) {
		t.Helper()
		for _, q := range []NextRequest{{Items: []string{"A"}, K: 5}, {Items: []string{"B"}, K: 5}, {Session: "q1", K: 5}, {Session: "tail", K: 5}} {
			want := answerKey(rs[0].Engine().Next(q))
			for _, r := range rs[1:] {
				if got := answerKey(r.Engine().Next(q)); got != want {
					t.Fatalf("query %+v: replicas differ:\n%s\n%s", q, want, got)
				}
			}
		}
		for _, it := range []string{"A", "B", "C", "D"} {
			want, _ := rs[0].Engine().Neighbors(it, 10)
			for _, r := range rs[1:] {
				if got, _ := r.Engine().Neighbors(it, 10); fmt.Sprint(got) != fmt.Sprint(want) {
					t.Fatalf("neighbours of %s differ: %v vs %v", it, want, got)
				}
			}
		}
	}
	same(a, b)

	// One NATS node down: writes and queries go on.
	if err := servers[2].Shutdown(context.Background()); err != nil {
		t.Fatal(err)
	}
	servers[2] = nil
	var tail strings.Builder
	for i := 0; i < 20; i++ {
		fmt.Fprintf(&tail, `{"session":"tail","item":"%c","ts":%d}`+"\n", 'A'+i%4, 1767300000000+int64(i)*1000)
	}
	waitFor(t, "ingest accepted with a node down", 30*time.Second, func() bool {
		var rep ingestReply
		code := doJSON(t, "POST", "http://"+b.HTTPAddr()+"/v1/events", tail.String(), &rep)
		return code == 200 && rep.Accepted == 20
	})
	waitFor(t, "both replicas apply the events sent with a node down", 30*time.Second, both(191))
	same(a, b)

	// A third replica from a snapshot converges to the same answers.
	var snap struct {
		Seq uint64 `json:"seq"`
	}
	if code := doJSON(t, "POST", "http://"+a.HTTPAddr()+"/v1/admin/snapshot", "", &snap); code != 200 || snap.Seq == 0 {
		t.Fatalf("snapshot: %d %+v", code, snap)
	}
	// One event after the snapshot, then the stream purged through the
	// snapshot's sequence: the third replica can reach the state only
	// through the snapshot (a full replay would give it one event).
	doJSON(t, "POST", "http://"+a.HTTPAddr()+"/v1/events", `{"session":"tail","item":"B","ts":1767300100000}`, nil)
	waitFor(t, "both replicas apply the event after the snapshot", 30*time.Second, both(192))
	purgeThrough(t, a, snap.Seq)
	c := newTestService(t, t.TempDir(), onCluster, func(o *ServiceOptions) { o.Bootstrap = true })
	defer shutdown(t, c)
	waitFor(t, "the bootstrapped replica reaches the stream's end", 90*time.Second, func() bool { return c.Engine().Stats().LastSequence == snap.Seq+1 })
	if got := c.Engine().Stats().EventsApplied; got != 192 {
		t.Fatalf("the bootstrapped replica applied %d events, want 192 (191 from the snapshot, 1 replayed)", got)
	}
	same(a, b, c)
}

// waitClusterReady waits until JetStream has a meta leader and takes the
// stream bo describes.
func waitClusterReady(t *testing.T, bo stream.BusOptions) {
	t.Helper()
	waitFor(t, "JetStream cluster ready", 60*time.Second, func() bool {
		ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		defer cancel()
		b, err := stream.Connect(ctx, bo)
		if err != nil {
			return false
		}
		defer b.Close()
		return b.EnsureStreams(ctx) == nil
	})
}
