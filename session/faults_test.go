package session

import (
	"context"
	"fmt"
	"io"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"sync/atomic"
	"syscall"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"waymark/store"
	"waymark/stream"
)

// busEvents publishes n events (sessions of three clicks on 20 items) to
// the server at url.
func busEvents(t *testing.T, url string, n int) {
	t.Helper()
	ctx := context.Background()
	bo := stream.DefaultBusOptions()
	bo.URL = url
	b, err := stream.Connect(ctx, bo)
	if err != nil {
		t.Fatal(err)
	}
	defer b.Close()
	if err := b.EnsureStreams(ctx); err != nil {
		t.Fatal(err)
	}
	evs := make([]stream.Event, n)
	for i := range evs {
		evs[i] = stream.Event{Session: fmt.Sprintf("later-%d", i/3), Item: fmt.Sprintf("i%d", i%20), TS: 1767312000000 + int64(i)}
	}
	if err := b.PublishEvents(ctx, evs); err != nil {
		t.Fatal(err)
	}
}

func getText(t *testing.T, url string) (int, string) {
	t.Helper()
	resp, err := http.Get(url)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp.StatusCode, string(b)
}

// TestStreamFaults: a data folder whose state cannot continue from the
// events stream (issue 12, finding 2: before, serve logged one WARN, said
// ready, answered 2xx to writes and never applied them). Each case learns
// the worked example's 171 events, damages the stream while serve is down,
// and restarts: serve must not consume, must answer /readyz 503 naming the
// reason, refuse writes with 503, set waymark_state_fault{reason} to 1,
// and, restarted with RebuildFromStream, relearn the stream as it is now.
func TestStreamFaults(t *testing.T) {
	cases := []struct {
		name   string
		damage func(t *testing.T, srv *stream.Server)
		reason string
		after  uint64 // events in the stream after the damage
	}{
		{"stream files lost", func(t *testing.T, srv *stream.Server) {
			// Emulated by a new server in a new folder: what serve finds
			// when its JetStream folder is gone.
		}, FaultCheckpointAhead, 0},
		{"stream re-created and refilled", func(t *testing.T, srv *stream.Server) {
			busEvents(t, srv.ClientURL(), 300)
		}, FaultStreamRecreated, 300},
		{"stream purged past the checkpoint", func(t *testing.T, srv *stream.Server) {
			busEvents(t, srv.ClientURL(), 30)
			ctx := context.Background()
			bo := stream.DefaultBusOptions()
			bo.URL = srv.ClientURL()
			b, err := stream.Connect(ctx, bo)
			if err != nil {
				t.Fatal(err)
			}
			defer b.Close()
			st, err := b.JetStream().Stream(ctx, bo.Stream)
			if err != nil {
				t.Fatal(err)
			}
			if err := st.Purge(ctx); err != nil {
				t.Fatal(err)
			}
		}, FaultStreamGap, 0},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			ctx := context.Background()
			dir := t.TempDir()
			srv, err := stream.StartServer(ctx, stream.ServerOptions{Dir: filepath.Join(dir, "bus"), Listen: "127.0.0.1:-1"})
			if err != nil {
				t.Fatal(err)
			}
			withBus := func(o *ServiceOptions) { o.Bus.URL = srv.ClientURL() }
			s := newTestService(t, dir, withBus)
			base := "http://" + s.HTTPAddr()
			doJSON(t, "POST", base+"/v1/events", workedEvents(), nil)
			waitFor(t, "the worked example to be committed", 20*time.Second, func() bool {
				cp, err := s.st.Checkpoint()
				return err == nil && cp.Seq == 171
			})
			shutdown(t, s)
			switch c.reason {
			case FaultStreamRecreated, FaultCheckpointAhead:
				// A new, empty stream: the old server and its files are gone.
				_ = srv.Shutdown(ctx)
				if err := os.RemoveAll(filepath.Join(dir, "bus")); err != nil {
					t.Fatal(err)
				}
				if srv, err = stream.StartServer(ctx, stream.ServerOptions{Dir: filepath.Join(dir, "bus"), Listen: "127.0.0.1:-1"}); err != nil {
					t.Fatal(err)
				}
			}
			defer srv.Shutdown(ctx)
			c.damage(t, srv)

			s = newTestService(t, dir, withBus)
			base = "http://" + s.HTTPAddr()
			code, body := getText(t, base+"/readyz")
			if code != http.StatusServiceUnavailable || !strings.Contains(body, `"reason":"`+c.reason+`"`) || !strings.Contains(body, "--rebuild-from-stream") {
				t.Fatalf("/readyz = %d %s; want 503 with reason %s and the way out", code, body, c.reason)
			}
			if code := doJSON(t, "POST", base+"/v1/events", workedEvents(), nil); code != http.StatusServiceUnavailable {
				t.Fatalf("POST /v1/events = %d while the state cannot apply it; want 503", code)
			}
			_, metrics := getText(t, base+"/metrics")
			if !strings.Contains(metrics, `waymark_state_fault{reason="`+c.reason+`"} 1`) {
				t.Fatalf("metrics lack waymark_state_fault{reason=%q} 1", c.reason)
			}
			if code, _ := getText(t, base+"/v1/popular?k=3"); code != http.StatusOK {
				t.Fatalf("GET /v1/popular = %d; queries must still be answered from the loaded state", code)
			}
			shutdown(t, s)

			s = newTestService(t, dir, withBus, func(o *ServiceOptions) { o.RebuildFromStream = true })
			defer shutdown(t, s)
			base = "http://" + s.HTTPAddr()
			waitFor(t, "readiness after the rebuild", 20*time.Second, func() bool {
				code, _ := getText(t, base+"/readyz")
				return code == http.StatusOK
			})
			// Ready means a lag under ReadyLag, not caught up: wait for
			// the stream's events.
			waitFor(t, fmt.Sprintf("the stream's %d events relearned", c.after), 20*time.Second, func() bool {
				return s.Engine().Stats().EventsApplied == c.after
			})
			if code := doJSON(t, "POST", base+"/v1/events", workedEvents(), nil); code/100 != 2 {
				t.Fatalf("POST /v1/events after the rebuild = %d", code)
			}
			waitFor(t, "the new writes to be applied", 20*time.Second, func() bool {
				return s.Engine().Stats().EventsApplied == c.after+171
			})
		})
	}
}

// TestLostCheckpointRebuilds: a store whose checkpoint key was deleted
// (issue 12, finding 5: before, the whole stream was replayed on top of
// the old counts, doubling popularity while events_applied looked right)
// is taken for damaged. With the stream holding every message since
// sequence 1, serve rebuilds and ends with exactly the clean counts; with
// the stream's head purged, it refuses to start with one line naming the
// way out.
func TestLostCheckpointRebuilds(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	s := newTestService(t, dir)
	base := "http://" + s.HTTPAddr()
	doJSON(t, "POST", base+"/v1/events", workedEvents(), nil)
	waitFor(t, "the worked example to be committed", 20*time.Second, func() bool {
		cp, err := s.st.Checkpoint()
		return err == nil && cp.Seq == 171
	})
	_, before := getText(t, base+"/v1/popular?k=10")
	shutdown(t, s)
	dropCheckpoint := func() {
		st, err := store.Open(ctx, filepath.Join(dir, "store"), store.DefaultOptions())
		if err != nil {
			t.Fatal(err)
		}
		if err := st.Commit(func(tx *store.Txn) error { return tx.Delete([]byte("x/checkpoint")) }); err != nil {
			t.Fatal(err)
		}
		if err := st.Close(); err != nil {
			t.Fatal(err)
		}
	}
	dropCheckpoint()

	s = newTestService(t, dir)
	base = "http://" + s.HTTPAddr()
	waitFor(t, "the rebuild", 20*time.Second, func() bool {
		code, _ := getText(t, base+"/readyz")
		return code == http.StatusOK && s.Engine().Stats().EventsApplied == 171
	})
	if _, after := getText(t, base+"/v1/popular?k=10"); after != before {
		t.Fatalf("popular after the rebuild:\n%s\nbefore:\n%s", after, before)
	}
	// Purge the stream's head: the state can no longer be rebuilt exactly.
	st, err := s.Bus().JetStream().Stream(ctx, s.Bus().Options().Stream)
	if err != nil {
		t.Fatal(err)
	}
	if err := st.Purge(ctx, jetstream.WithPurgeKeep(10)); err != nil {
		t.Fatal(err)
	}
	shutdown(t, s)
	dropCheckpoint()
	o := DefaultServiceOptions()
	o.DataDir, o.HTTPAddr, o.NATSListen = dir, "127.0.0.1:0", "127.0.0.1:-1"
	if s, err := Open(ctx, o); err == nil {
		shutdown(t, s)
		t.Fatal("serve started on state without a checkpoint and a stream that cannot rebuild it")
	} else if !strings.Contains(err.Error(), "no checkpoint") || !strings.Contains(err.Error(), "--rebuild-from-stream") || strings.Contains(err.Error(), "\n") {
		t.Fatalf("refusal %q: want one line naming the damage and the way out", err)
	}
}

// TestNoSpacePausesAndResumes: a commit that fails for want of disk space
// (issue 12, finding 6: before, the process died with SIGBUS in Badger's
// memtable, and before that a commit error stopped the consumer for good)
// sets the no_space fault, keeps the learned state answering, and is
// retried until it fits; the stored state is then exactly what was
// applied, and the fault clears. The failure is injected where the store's
// commit returns; syscall.ENOSPC is what a full disk reports.
func TestNoSpacePausesAndResumes(t *testing.T) {
	ctx := context.Background()
	st, err := store.Open(ctx, t.TempDir(), store.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	e, err := NewEngine(ctx, st, nil, DefaultEngineOptions())
	if err != nil {
		t.Fatal(err)
	}
	var full atomic.Bool
	var refused atomic.Int64
	full.Store(true)
	e.commit = func(b *store.Batch) error {
		if full.Load() {
			refused.Add(1)
			return fmt.Errorf("commit: write: %w", syscall.ENOSPC)
		}
		return st.CommitBatch(b)
	}
	var msgs []stream.Msg
	for i, line := range strings.Split(strings.TrimSpace(workedEvents()), "\n") {
		msgs = append(msgs, stream.Msg{Seq: uint64(i + 1), Subject: "waymark.events", Data: []byte(line)})
	}
	if err := e.Handle(ctx, msgs); err != nil {
		t.Fatal(err)
	}
	if err := e.Flush(ctx); err != nil {
		t.Fatal(err)
	}
	waitFor(t, "the no_space fault", 10*time.Second, func() bool {
		fs := e.Faults()
		return len(fs) == 1 && fs[0].Reason == FaultNoSpace && strings.Contains(fs[0].Message, "no space left")
	})
	if got := e.Stats().EventsApplied; got != 171 {
		t.Fatalf("%d events applied in memory while the disk is full, want 171", got)
	}
	if cp, _ := st.Checkpoint(); cp.Seq != 0 {
		t.Fatalf("checkpoint at %d while every commit was refused", cp.Seq)
	}
	waitFor(t, "a retry of the refused commit", 10*time.Second, func() bool { return refused.Load() >= 2 })
	full.Store(false)
	sctx, cancel := context.WithTimeout(ctx, 20*time.Second)
	defer cancel()
	if err := e.Sync(sctx); err != nil {
		t.Fatalf("sync once space returned: %v", err)
	}
	if fs := e.Faults(); len(fs) != 0 {
		t.Fatalf("faults after space returned: %v", fs)
	}
	cp, err := st.Checkpoint()
	if err != nil || cp.Seq != 171 || cp.Applied != 171 {
		t.Fatalf("checkpoint %+v, %v; want seq and applied 171", cp, err)
	}
}

// TestNoSpaceOnTmpfs is TestNoSpacePausesAndResumes on a real full
// filesystem: the store on a 128 MiB tmpfs, a file filling it to 40 MiB
// free. The commit is refused before Badger writes anything (a write into
// a mapped page a full disk cannot back is SIGBUS, not an error), the
// engine reports no_space, and once the file is removed the same flush
// commits. It needs mount(2) (root); elsewhere it skips.
func TestNoSpaceOnTmpfs(t *testing.T) {
	mnt := filepath.Join(t.TempDir(), "mnt")
	if err := os.Mkdir(mnt, 0o755); err != nil {
		t.Fatal(err)
	}
	if err := syscall.Mount("tmpfs", mnt, "tmpfs", 0, "size=128m"); err != nil {
		t.Skipf("cannot mount a tmpfs here (%v): the full-disk reaction is covered by TestNoSpacePausesAndResumes only", err)
	}
	defer syscall.Unmount(mnt, 0)
	ctx := context.Background()
	so := store.DefaultOptions()
	so.MemTableSize = 8 << 20
	st, err := store.Open(ctx, filepath.Join(mnt, "store"), so)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	e, err := NewEngine(ctx, st, nil, DefaultEngineOptions())
	if err != nil {
		t.Fatal(err)
	}
	var fs syscall.Statfs_t
	if err := syscall.Statfs(mnt, &fs); err != nil {
		t.Fatal(err)
	}
	filler := filepath.Join(mnt, "filler")
	f, err := os.Create(filler)
	if err != nil {
		t.Fatal(err)
	}
	chunk := make([]byte, 1<<20)
	for free := int64(fs.Bavail) * int64(fs.Bsize); free > 40<<20; free -= 1 << 20 {
		if _, err := f.Write(chunk); err != nil {
			t.Fatal(err)
		}
	}
	f.Close()
	var msgs []stream.Msg
	for i, line := range strings.Split(strings.TrimSpace(workedEvents()), "\n") {
		msgs = append(msgs, stream.Msg{Seq: uint64(i + 1), Subject: "waymark.events", Data: []byte(line)})
	}
	if err := e.Handle(ctx, msgs); err != nil {
		t.Fatal(err)
	}
	if err := e.Flush(ctx); err != nil {
		t.Fatal(err)
	}
	waitFor(t, "the no_space fault", 10*time.Second, func() bool {
		fs := e.Faults()
		return len(fs) == 1 && fs[0].Reason == FaultNoSpace
	})
	if cp, _ := st.Checkpoint(); cp.Seq != 0 {
		t.Fatalf("checkpoint at %d on a full disk", cp.Seq)
	}
	if err := os.Remove(filler); err != nil {
		t.Fatal(err)
	}
	sctx, cancel := context.WithTimeout(ctx, 20*time.Second)
	defer cancel()
	if err := e.Sync(sctx); err != nil {
		t.Fatalf("sync once space returned: %v", err)
	}
	if cp, err := st.Checkpoint(); err != nil || cp.Seq != 171 || len(e.Faults()) != 0 {
		t.Fatalf("checkpoint %+v, %v, faults %v; want seq 171 and none", cp, err, e.Faults())
	}
}
