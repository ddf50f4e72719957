package session

import (
	"testing"
	"time"
)

// TestFlushBySize: a flush starts when its estimated size reaches
// FlushBytes, long before the interval or the event count would start one,
// so no flush outgrows the store's transaction limit.
func TestFlushBySize(t *testing.T) {
	s := newTestService(t, t.TempDir(), func(o *ServiceOptions) {
		o.Engine.FlushInterval, o.Engine.FlushEvents, o.Engine.FlushBytes = time.Hour, 1_000_000, 1024
		o.MaxAckPending = 2_000_000
	})
	defer shutdown(t, s)
	doJSON(t, "POST", "http://"+s.HTTPAddr()+"/v1/events", workedEvents(), nil)
	waitFor(t, "a size-triggered flush to commit everything", 20*time.Second, func() bool {
		cp, err := s.st.Checkpoint()
		return err == nil && cp.Applied == 171
	})
}
