package session

import (
	"context"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"
)

// purgeThrough deletes every message of the events stream up to and
// including seq, as a stream with a retention limit does. A replica that
// starts afterwards can only reach the state of the messages before seq+1
// through a snapshot: if it loaded none, it would learn the later messages
// alone and its counts would show it.
func purgeThrough(t *testing.T, s *Service, seq uint64) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	st, err := s.Bus().JetStream().Stream(ctx, s.Bus().Options().Stream)
	if err != nil {
		t.Fatal(err)
	}
	if err := st.Purge(ctx, jetstream.WithPurgeSequence(seq+1)); err != nil {
		t.Fatalf("purge through seq %d: %v", seq, err)
	}
	info, err := st.Info(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if info.State.FirstSeq != seq+1 {
		t.Fatalf("after the purge the stream starts at seq %d, want %d", info.State.FirstSeq, seq+1)
	}
}

// TestSnapshotBootstrap: a second replica started from the first one's
// snapshot loads its state, continues from the snapshot's sequence with a
// consumer of its own, and converges to the same answers. The stream is
// purged through the snapshot's sequence before the replica starts, so a
// full replay cannot stand in for the snapshot: without it the replica
// would hold the two late events only.
func TestSnapshotBootstrap(t *testing.T) {
	a := newTestService(t, t.TempDir())
	defer shutdown(t, a)
	base := "http://" + a.HTTPAddr()
	doJSON(t, "POST", base+"/v1/events", workedEvents(), nil)
	waitFor(t, "events applied", 20*time.Second, func() bool { return a.Engine().Stats().EventsApplied == 171 })
	// Wait until the flush has committed everything, then snapshot.
	waitFor(t, "a flush", 5*time.Second, func() bool {
		cp, err := a.st.Checkpoint()
		return err == nil && cp.Applied == 171
	})
	var snap struct {
		Seq  uint64 `json:"seq"`
		Name string `json:"name"`
	}
	if code := doJSON(t, "POST", base+"/v1/admin/snapshot", "", &snap); code != 200 || snap.Seq == 0 {
		t.Fatalf("snapshot: %d %+v", code, snap)
	}
	// More events after the snapshot: the new replica must replay them.
	doJSON(t, "POST", base+"/v1/events", `{"session":"late","item":"A","ts":1767229999000}`+"\n"+`{"session":"late","item":"D","ts":1767230000000}`, nil)
	waitFor(t, "late events", 10*time.Second, func() bool { return a.Engine().Stats().EventsApplied == 173 })
	purgeThrough(t, a, snap.Seq)

	b := newTestService(t, t.TempDir(), func(o *ServiceOptions) {
		o.Bus.URL = a.NATSURL()
		o.Bootstrap = true
	})
	defer shutdown(t, b)
	waitFor(t, "replica b caught up", 20*time.Second, func() bool { return b.Engine().Stats().LastSequence == snap.Seq+2 })
	if got := b.Engine().Stats(); got.EventsApplied != 173 || got.Items != 4 {
		t.Fatalf("replica b after bootstrap: %d events applied, %d items; want 173 and 4 (171 from the snapshot, 2 replayed)", got.EventsApplied, got.Items)
	}
	ra, _ := a.st.ReplicaID(nil)
	rb, _ := b.st.ReplicaID(newReplicaID)
	if ra == rb {
		t.Fatalf("the bootstrapped replica kept the source's identity %q", ra)
	}
	for _, q := range []NextRequest{{Items: []string{"A"}, K: 5}, {Session: "q1", K: 5}, {Session: "late", K: 5}} {
		x, y := a.Engine().Next(q), b.Engine().Next(q)
		if answerKey(x) != answerKey(y) {
			t.Errorf("query %+v: replicas differ:\n%v\n%v", q, x, y)
		}
	}
	// Two replicas on one stream both see every message.
	doJSON(t, "POST", base+"/v1/events", `{"session":"both","item":"B","ts":1767230001000}`, nil)
	waitFor(t, "both replicas apply a new event", 10*time.Second, func() bool {
		return a.Engine().Stats().EventsApplied == 174 && b.Engine().Stats().EventsApplied == 174
	})
}
