package session

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math/rand/v2"
	"net"
	"net/http"
	"net/http/httptest"
	"net/url"
	"os"
	"os/exec"
	"os/signal"
	"path/filepath"
	"slices"
	"strings"
	"syscall"
	"testing"
	"time"

	"waymark/bench/synth"
	"waymark/store"
	"waymark/stream"
)

// TestMain doubles as the service process of the crash test: run with
// WAYMARK_TEST_CHILD set, the test binary serves until it is killed, or
// until SIGTERM, on which it shuts down cleanly (flushing what it holds).
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
	term := make(chan os.Signal, 1)
	signal.Notify(term, syscall.SIGTERM)
	select {
	case err := <-s.Err():
		fmt.Fprintln(os.Stderr, "child:", err)
		os.Exit(1)
	case <-term:
		ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
		defer cancel()
		if err := s.Shutdown(ctx); err != nil {
			fmt.Fprintln(os.Stderr, "child shutdown:", err)
			os.Exit(1)
		}
		os.Exit(0)
	}
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
	waitFor(t, "child healthy", 90*time.Second, func() bool {
		var v map[string]string
		resp, err := httpGet(c.http + "/healthz")
		_ = v
		return err == nil && resp == 200
	})
	return c
}

func (c *child) kill() {
	if c.cmd.Process != nil && c.cmd.ProcessState == nil {
		_ = c.cmd.Process.Signal(syscall.SIGKILL)
		_ = c.cmd.Wait()
	}
}

// stop asks the child to shut down cleanly and waits for it.
func (c *child) stop(t *testing.T) {
	t.Helper()
	if err := c.cmd.Process.Signal(syscall.SIGTERM); err != nil {
		t.Fatal(err)
	}
	if err := c.cmd.Wait(); err != nil {
		t.Fatalf("the service did not stop cleanly: %v", err)
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

// TestCrashRecoveryIsExact kills the service process with SIGKILL in the
// middle of ingest, restarts it on the same folder each time, and checks
// that it applied every event exactly once and learned exactly what a
// clean, crash-free engine learns from the same messages: the same answers
// over HTTP (every item's neighbour list, the popular list, the priors
// export, the counters) and, after a clean stop, the same store, key for
// key and byte for byte (dictionary, tracked sessions, every model's rows,
// the checkpoint), the replica's random identity aside.
//
// The events are generated (bench/synth: Zipf popularity over 5000 items,
// 200 interleaved sessions), so the test runs without the open datasets.
// They are published a chunk at a time and the service is killed while it
// is still learning a chunk; a kill counts only when the store it leaves
// behind holds less than what was published (read from the store before
// the restart), so it landed mid-ingest and the restart had work to redo.
func TestCrashRecoveryIsExact(t *testing.T) {
	if testing.Short() {
		t.Skip("spawns service processes")
	}
	const (
		chunk    = 10_000
		planned  = 4 // kills that must land mid-ingest
		attempts = 7 // kills tried at most; a miss costs one chunk
		n        = chunk * (attempts + 1)
	)
	evs := synth.Generate(synth.Options{Events: n, Items: 5000, Concurrent: 200, Seed: 7})
	dir := t.TempDir()
	httpAddr, natsAddr := freeAddr(t), freeAddr(t)
	c := startChild(t, dir, httpAddr, natsAddr)
	ctx := context.Background()
	publish := func(c *child, part []stream.Event) {
		t.Helper()
		bo := stream.DefaultBusOptions()
		bo.URL = c.nat
		bus, err := stream.Connect(ctx, bo)
		if err != nil {
			t.Fatal(err)
		}
		defer bus.Close()
		if err := bus.PublishEvents(ctx, part); err != nil {
			t.Fatal(err)
		}
	}
	rng := rand.New(rand.NewPCG(7, 7))
	published, landed := 0, 0
	for try := 1; try <= attempts && landed < planned; try++ {
		publish(c, evs[published:published+chunk])
		published += chunk
		// Kill somewhere in the first four fifths of the chunk, as soon as
		// the count passes the target (polled without sleeping, so the
		// kill follows the target by one HTTP round trip).
		target := uint64(published - chunk + chunk/10 + rng.IntN(chunk*7/10))
		var seen uint64
		deadline := time.Now().Add(60 * time.Second)
		for seen = c.applied(t); seen < target; seen = c.applied(t) {
			if time.Now().After(deadline) {
				t.Fatalf("kill %d: events_applied stuck at %d, target %d", try, seen, target)
			}
		}
		c.kill()
		cp := storedCheckpoint(t, filepath.Join(dir, "store"))
		mid := cp.Applied < uint64(published)
		if mid {
			landed++
		}
		t.Logf("kill %d: target %d, %d applied at the last look, store holds %d of %d published (mid-ingest: %v)",
			try, target, seen, cp.Applied, published, mid)
		c = startChild(t, dir, httpAddr, natsAddr)
	}
	if landed < planned {
		t.Fatalf("%d kills landed mid-ingest, want %d: the service learned each chunk before the kill", landed, planned)
	}
	publish(c, evs[published:])
	waitFor(t, "all events applied", 2*time.Minute, func() bool { return c.applied(t) >= n })
	var st Stats
	doJSON(t, "GET", c.http+"/v1/stats", "", &st)
	if st.EventsApplied != n || st.LastSequence != n || st.EventsRejected != 0 {
		t.Fatalf("after %d kills: events_applied %d, last sequence %d, rejected %d; want exactly %d, %d, 0",
			landed, st.EventsApplied, st.LastSequence, st.EventsRejected, n, n)
	}

	// The clean run: the same messages, with the same sequence numbers,
	// through an engine of its own.
	eng, cst := cleanEngine(t, eventMsgs(evs))
	cs := eng.Stats()
	if cs.Items < 4000 {
		t.Fatalf("the clean run knows %d items; the stream was meant to reach thousands", cs.Items)
	}
	compared := sameAsClean(t, "after the kills", viaURL(t, c.http), eng, scoreProbes(evs, 300))

	// A clean stop flushes what the service holds; then both stores must
	// hold the same keys and values (pair rows compared as sets: see
	// storeContents).
	c.stop(t)
	got := storeContents(t, filepath.Join(dir, "store"))
	want := contentsOf(t, cst)
	delete(got, "x/replica")
	delete(want, "x/replica")
	// The checkpoint names the stream it was learned from (its creation
	// time); the clean engine learned the same messages from no stream.
	got["x/checkpoint"] = withoutStream(t, got["x/checkpoint"])
	want["x/checkpoint"] = withoutStream(t, want["x/checkpoint"])
	if len(want) < cs.Items {
		t.Fatalf("the clean store holds %d keys for %d items", len(want), cs.Items)
	}
	diffs := 0
	for k, w := range want {
		if g, ok := got[k]; !ok || !bytes.Equal(g, w) {
			if diffs++; diffs <= 5 {
				t.Errorf("key %q: after the kills %q (present %v), clean run %q", k, trimBytes(g), ok, trimBytes(w))
			}
		}
	}
	for k, g := range got {
		if _, ok := want[k]; !ok {
			if diffs++; diffs <= 10 {
				t.Errorf("key %q only after the kills: %q", k, trimBytes(g))
			}
		}
	}
	if diffs > 0 {
		t.Fatalf("%d of %d stored keys differ from the clean run", diffs, len(want))
	}
	t.Logf("%d kills mid-ingest; %d events, %d items, %d sessions; %d answers and %d stored keys identical to the clean run",
		landed, n, cs.Items, cs.SessionsActive, compared, len(want))
}

// storedCheckpoint reads the checkpoint of the store in dir, whose service
// is not running.
func storedCheckpoint(t *testing.T, dir string) store.Checkpoint {
	t.Helper()
	st, err := store.Open(context.Background(), dir, store.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	cp, err := st.Checkpoint()
	if err != nil {
		t.Fatal(err)
	}
	return cp
}

// storeContents reads every key and value of the store in dir, with the
// pair rows of the models in a canonical order: a pair row is written as
// its hash slots lie (models/pairs.go), and a row reloaded at a restart is
// rebuilt into a slot array of another size than the one it grew in, so
// the same set of pairs is written in another order after a restart. Each
// value under "m/" made of 12-byte (id, weight) records is sorted by
// record; the records themselves must be identical.
func storeContents(t *testing.T, dir string) map[string][]byte {
	t.Helper()
	st, err := store.Open(context.Background(), dir, store.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	return contentsOf(t, st)
}

// contentsOf is storeContents of an open store.
func contentsOf(t *testing.T, st *store.Store) map[string][]byte {
	t.Helper()
	out := map[string][]byte{}
	err := st.Scan(context.Background(), nil, func(k, v []byte) error {
		v = bytes.Clone(v)
		if bytes.HasPrefix(k, []byte("m/")) && len(v)%12 == 0 {
			recs := make([][]byte, 0, len(v)/12)
			for i := 0; i < len(v); i += 12 {
				recs = append(recs, v[i:i+12])
			}
			slices.SortFunc(recs, bytes.Compare)
			v = bytes.Join(recs, nil)
		}
		out[string(k)] = v
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

func trimBytes(b []byte) []byte {
	if len(b) > 120 {
		return b[:120]
	}
	return b
}

// cleanEngine learns msgs, in order, with the sequence numbers they carry,
// through an engine on a store of its own: no bus, no kill, no restart. It
// is the reference the fault tests compare with. The store is closed at
// the end of the test.
func cleanEngine(t *testing.T, msgs []stream.Msg) (eng *Engine, st *store.Store) {
	t.Helper()
	ctx := context.Background()
	st, err := store.Open(ctx, t.TempDir(), store.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = st.Close() })
	eng, err = NewEngine(ctx, st, nil, DefaultServiceOptions().Engine)
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i < len(msgs); i += 1000 {
		if err := eng.Handle(ctx, msgs[i:min(i+1000, len(msgs))]); err != nil {
			t.Fatal(err)
		}
	}
	if err := eng.Sync(ctx); err != nil {
		t.Fatal(err)
	}
	return eng, st
}

// eventMsgs numbers evs as the stream's messages 1..len(evs).
func eventMsgs(evs []stream.Event) []stream.Msg {
	msgs := make([]stream.Msg, len(evs))
	for i := range evs {
		msgs[i] = stream.Msg{Seq: uint64(i + 1), Subject: "waymark.events", Data: evs[i].AppendJSON(nil)}
	}
	return msgs
}

// requester sends one HTTP request to a service and returns the status and
// body.
type requester func(method, path, body string) (int, []byte)

// viaURL sends requests to a service listening at base.
func viaURL(t *testing.T, base string) requester {
	return func(method, path, body string) (int, []byte) {
		t.Helper()
		req, err := http.NewRequest(method, base+path, strings.NewReader(body))
		if err != nil {
			t.Fatal(err)
		}
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		b, err := io.ReadAll(resp.Body)
		if err != nil {
			t.Fatal(err)
		}
		return resp.StatusCode, b
	}
}

// viaHandler sends requests to an engine through the HTTP API's handler.
func viaHandler(eng *Engine) requester {
	srv := NewServer(eng, nil, ServerOptions{})
	return func(method, path, body string) (int, []byte) {
		rec := httptest.NewRecorder()
		req := httptest.NewRequest(method, path, strings.NewReader(body))
		if body != "" {
			req.Header.Set("Content-Type", "application/json")
		}
		srv.ServeHTTP(rec, req)
		return rec.Code, rec.Body.Bytes()
	}
}

// sameAsClean compares what a service learned with the clean engine, through
// the read-only API, byte for byte: the counters, the popular list, the
// priors export (every exporting model's neighbour rows), the neighbour
// list of every item the clean engine knows, and /v1/score for probe
// sessions (a prefix of clicks and candidates). No request here writes to
// the log. It returns how many answers it compared.
func sameAsClean(t *testing.T, label string, got requester, clean *Engine, probes []ScoreRequest) int {
	t.Helper()
	want := viaHandler(clean)
	var gs Stats
	code, b := got("GET", "/v1/stats", "")
	if code != 200 {
		t.Fatalf("%s: GET /v1/stats: %d %s", label, code, b)
	}
	if err := json.Unmarshal(b, &gs); err != nil {
		t.Fatal(err)
	}
	cs := clean.Stats()
	if gs.EventsApplied != cs.EventsApplied || gs.EventsRejected != cs.EventsRejected || gs.Items != cs.Items ||
		gs.SessionsActive != cs.SessionsActive || gs.Watermark != cs.Watermark ||
		gs.CatalogApplied != cs.CatalogApplied || gs.ItemsOverflow != cs.ItemsOverflow {
		t.Fatalf("%s: stats %+v\nclean engine %+v", label, gs, cs)
	}
	same := func(method, path, body string) {
		t.Helper()
		gc, gb := got(method, path, body)
		wc, wb := want(method, path, body)
		if gc != 200 || wc != 200 || !bytes.Equal(gb, wb) {
			t.Fatalf("%s: %s %s %s:\n%d %.600s\nclean engine:\n%d %.600s", label, method, path, body, gc, gb, wc, wb)
		}
	}
	n := 1
	// The priors header holds counters only (items, events applied,
	// watermark), so the whole export compares.
	for _, path := range []string{"/v1/popular?k=1000", "/v1/admin/priors"} {
		same("GET", path, "")
		n++
	}
	clean.mu.RLock()
	names := make([]string, clean.p.Dict.Len())
	for id := range names {
		names[id] = clean.p.Dict.Name(uint32(id))
	}
	clean.mu.RUnlock()
	for _, name := range names {
		same("GET", "/v1/items/"+url.PathEscape(name)+"/neighbors?k=20", "")
		n++
	}
	for _, p := range probes {
		b, _ := json.Marshal(scoreBody{Items: p.Items, Candidates: p.Candidates})
		same("POST", "/v1/score", string(b))
		n++
	}
	return n
}

// scoreProbes builds /v1/score requests from sessions of evs: the first
// clicks of a session, and as candidates the items that followed plus a
// few others and one unknown id.
func scoreProbes(evs []stream.Event, n int) []ScoreRequest {
	bySession := map[string][]string{}
	var order []string
	for i := range evs {
		s := evs[i].Session
		if _, ok := bySession[s]; !ok {
			order = append(order, s)
		}
		bySession[s] = append(bySession[s], evs[i].Item)
	}
	var out []ScoreRequest
	for i := 0; len(out) < n && i < len(order); i += 1 + len(order)/n {
		clicks := bySession[order[i]]
		if len(clicks) < 3 {
			continue
		}
		cut := len(clicks) / 2
		cands := append([]string(nil), clicks[cut:]...)
		cands = append(cands, evs[(i*7919)%len(evs)].Item, evs[(i*104729)%len(evs)].Item, "never-clicked")
		out = append(out, ScoreRequest{Items: clicks[:cut], Candidates: cands})
	}
	return out
}

// withoutStream returns a stored checkpoint without its stream identity,
// the one field two stores of the same messages may differ in.
func withoutStream(t *testing.T, cp []byte) []byte {
	t.Helper()
	if cp == nil {
		return nil
	}
	var m map[string]any
	if err := json.Unmarshal(cp, &m); err != nil {
		t.Fatalf("stored checkpoint %q: %v", cp, err)
	}
	delete(m, "stream")
	out, err := json.Marshal(m)
	if err != nil {
		t.Fatal(err)
	}
	return out
}
