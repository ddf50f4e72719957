package session

import (
	"context"
	"fmt"
	"math/rand/v2"
	"net"
	"net/http"
	"os"
	"os/exec"
	"syscall"
	"testing"
	"time"

	"waymark/models"
	"waymark/stream"
)

// TestMain doubles as the service process of the crash test: run with
// WAYMARK_TEST_CHILD set, the test binary serves until it is killed.
func TestMain(m *testing.M) {
	if os.Getenv("WAYMARK_TEST_CHILD") == "" {
		os.Exit(runWithTempConfig(m))
	}
	o := DefaultServiceOptions()
	o.DataDir = os.Getenv("WAYMARK_TEST_DIR")
	o.HTTPAddr = os.Getenv("WAYMARK_TEST_HTTP")
	o.NATSListen = os.Getenv("WAYMARK_TEST_NATS")
	o.Engine.FlushInterval = 20 * time.Millisecond
	o.Engine.FlushEvents = 5000
	s, err := Open(context.Background(), o)
	if err != nil {
		fmt.Fprintln(os.Stderr, "child:", err)
		os.Exit(1)
	}
	<-s.Err()
	os.Exit(1)
}

// runWithTempConfig runs the tests with the user's config folder (where
// services record their bus credentials, stream.DefaultCredentialsDir) in
// a temporary folder, so tests never write in the real home; the crash
// test's child processes inherit it.
func runWithTempConfig(m *testing.M) int {
	dir, err := os.MkdirTemp("", "waymark-session-home-")
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		return 1
	}
	defer os.RemoveAll(dir)
	os.Setenv("XDG_CONFIG_HOME", dir)
	os.Setenv("HOME", dir)
	return m.Run()
}

func freeAddr(t testing.TB) string {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer ln.Close()
	return ln.Addr().String()
}

type child struct {
	cmd       *exec.Cmd
	http, nat string
}

func startChild(t *testing.T, dir, httpAddr, natsAddr string) *child {
	t.Helper()
	cmd := exec.Command(os.Args[0], "-test.run=^$")
	cmd.Env = append(os.Environ(), "WAYMARK_TEST_CHILD=1", "WAYMARK_TEST_DIR="+dir,
		"WAYMARK_TEST_HTTP="+httpAddr, "WAYMARK_TEST_NATS="+natsAddr)
	cmd.Stderr = os.Stderr
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	c := &child{cmd: cmd, http: "http://" + httpAddr, nat: "nats://" + natsAddr}
	t.Cleanup(func() { c.kill() })
	waitFor(t, "child healthy", 30*time.Second, func() bool {
		var v map[string]string
		resp, err := httpGet(c.http + "/healthz")
		_ = v
		return err == nil && resp == 200
	})
	return c
}

func (c *child) kill() {
	if c.cmd.Process != nil {
		_ = c.cmd.Process.Signal(syscall.SIGKILL)
		_, _ = c.cmd.Process.Wait()
	}
}

func httpGet(url string) (int, error) {
	req, _ := http.NewRequest("GET", url, nil)
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		return 0, err
	}
	resp.Body.Close()
	return resp.StatusCode, nil
}

func (c *child) applied(t testing.TB) uint64 {
	var st Stats
	if code := doJSON(t, "GET", c.http+"/v1/stats", "", &st); code != 200 {
		return 0
	}
	return st.EventsApplied
}

// TestCrashRecoveryIsExact kills the service process with SIGKILL at
// random moments during ingest, restarts it on the same folder, and checks
// that it applied every event exactly once and learned exactly what a
// clean, crash-free pipeline learns from the same events.
func TestCrashRecoveryIsExact(t *testing.T) {
	if testing.Short() {
		t.Skip("spawns service processes")
	}
	const n = 120_000
	evs := msnbcEvents(t, n)
	dir := t.TempDir()
	httpAddr, natsAddr := freeAddr(t), freeAddr(t)
	c := startChild(t, dir, httpAddr, natsAddr)
	ctx := context.Background()
	bo := stream.DefaultBusOptions()
	bo.URL = c.nat
	bus, err := stream.Connect(ctx, bo)
	if err != nil {
		t.Fatal(err)
	}
	if err := bus.PublishEvents(ctx, evs); err != nil {
		t.Fatal(err)
	}
	bus.Close()
	rng := rand.New(rand.NewPCG(7, 7))
	kills := 0
	for kills < 3 {
		target := uint64(rng.IntN(n))
		deadline := time.Now().Add(30 * time.Second)
		for c.applied(t) < target && time.Now().Before(deadline) {
			time.Sleep(time.Duration(rng.IntN(20)) * time.Millisecond)
		}
		if c.applied(t) >= n {
			break // it finished before this kill
		}
		c.kill()
		kills++
		c = startChild(t, dir, httpAddr, natsAddr)
	}
	waitFor(t, "all events applied", 60*time.Second, func() bool { return c.applied(t) >= n })
	if got := c.applied(t); got != n {
		t.Fatalf("events_applied = %d after %d kills, want exactly %d", got, kills, n)
	}
	t.Logf("%d kills during ingest", kills)

	// The clean run: the same events through a pipeline, no bus, no disk.
	p, err := NewPipeline(DefaultEngineOptions().Pipeline)
	if err != nil {
		t.Fatal(err)
	}
	for i := range evs {
		p.Apply(&evs[i])
	}
	im, _ := p.Set.Get("iknn")
	iknn := im.(*models.IKNN)
	for id := 0; id < p.Dict.Len(); id++ {
		name := p.Dict.Name(uint32(id))
		var got neighborsReply
		doJSON(t, "GET", c.http+"/v1/items/"+name+"/neighbors?k=20", "", &got)
		want := iknn.Neighbors(uint32(id), 20, p.Checkpoint().Watermark)
		if len(got.Neighbors) != len(want) {
			t.Fatalf("%s: %d neighbours, clean run %d", name, len(got.Neighbors), len(want))
		}
		for i, w := range want {
			g := got.Neighbors[i]
			if g.Item != p.Dict.Name(w.Item) || g.Score != w.Score {
				t.Fatalf("%s neighbour %d: %s %v, clean run %s %v", name, i, g.Item, g.Score, p.Dict.Name(w.Item), w.Score)
			}
		}
	}
}
