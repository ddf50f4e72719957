package session

import (
	"testing"
	"time"
)

// TestSnapshotBootstrap: a second replica started from the first one's
// snapshot loads its state, continues from the snapshot's sequence with a
// consumer of its own, and converges to the same answers.
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

	b := newTestService(t, t.TempDir(), func(o *ServiceOptions) {
		o.Bus.URL = a.NATSURL()
		o.Bootstrap = true
	})
	defer shutdown(t, b)
	waitFor(t, "replica b caught up", 20*time.Second, func() bool { return b.Engine().Stats().EventsApplied == 173 })
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
