package session

import (
	"context"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus/testutil"
)

// TestRejectedCountedByKind: bad click events, catalogue records and
// control messages are counted apart (issue 12: events_rejected mixed
// them), in /v1/stats and in the kind label of
// waymark_events_rejected_total, and the stored counts survive a restart.
func TestRejectedCountedByKind(t *testing.T) {
	dir := t.TempDir()
	s := newTestService(t, dir)
	ctx := context.Background()
	bo := s.Bus().Options()
	pub := func(subject string, msgs ...string) {
		t.Helper()
		data := make([][]byte, len(msgs))
		for i, m := range msgs {
			data[i] = []byte(m)
		}
		if err := s.Bus().PublishRaw(ctx, subject, data); err != nil {
			t.Fatal(err)
		}
	}
	// Two bad events, one bad catalogue record, three bad control
	// messages (each fails its own decoder), then one valid event so the
	// wait knows the bad ones are behind it.
	pub(bo.Subject, "not json", `{"session":"x"}`)
	pub(bo.CatalogSubject, `{"item":`)
	pub(bo.ControlSubject, "not json", `{"forget":"a","served":{"session":"b","items":["c"]}}`, `{"forget":"bad\u0000id"}`)
	pub(bo.Subject, `{"session":"x","item":"A","ts":1767225999000}`)
	want := Stats{EventsApplied: 1, EventsRejected: 2, CatalogRejected: 1, ControlRejected: 3}
	same := func(st Stats) bool {
		return st.EventsApplied == want.EventsApplied && st.EventsRejected == want.EventsRejected &&
			st.CatalogRejected == want.CatalogRejected && st.ControlRejected == want.ControlRejected
	}
	waitFor(t, "the valid event after the bad messages", 10*time.Second, func() bool { return s.Engine().Stats().LastSequence >= 7 })
	if st := s.Engine().Stats(); !same(st) {
		t.Fatalf("stats %+v; want applied 1 and rejected 2 events, 1 catalogue record, 3 control messages", st)
	}
	const metric = `
# HELP waymark_events_rejected_total Bus messages rejected as invalid and dead-lettered, by kind: click events, catalogue records, control messages.
# TYPE waymark_events_rejected_total counter
waymark_events_rejected_total{kind="catalog"} 1
waymark_events_rejected_total{kind="control"} 3
waymark_events_rejected_total{kind="event"} 2
`
	// The counter moves after the stats (once the apply lock is
	// released, beside the dead-letter publish): poll it.
	for deadline := time.Now().Add(10 * time.Second); ; time.Sleep(20 * time.Millisecond) {
		err := testutil.GatherAndCompare(s.reg, strings.NewReader(metric), "waymark_events_rejected_total")
		if err == nil {
			break
		}
		if time.Now().After(deadline) {
			t.Fatal(err)
		}
	}
	shutdown(t, s)

	s = newTestService(t, dir)
	defer shutdown(t, s)
	if st := s.Engine().Stats(); !same(st) {
		t.Fatalf("after restart: %+v; want the same counts", st)
	}
}
