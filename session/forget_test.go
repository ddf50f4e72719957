package session

import (
	"net/http"
	"strings"
	"testing"
	"time"
)

// TestForgetThroughTheLog: DELETE publishes a forget command; the session
// is gone once the command is applied, and stays gone after a restart.
func TestForgetThroughTheLog(t *testing.T) {
	dir := t.TempDir()
	s := newTestService(t, dir)
	base := "http://" + s.HTTPAddr()
	doJSON(t, "POST", base+"/v1/events", workedEvents(), nil)
	waitFor(t, "events applied", 20*time.Second, func() bool { return s.Engine().Stats().EventsApplied == 171 })
	if _, ok := s.Engine().p.SessionQuery("q1"); !ok {
		t.Fatal("q1 should be tracked before the delete")
	}
	var rep forgetReply
	if code := doJSON(t, "DELETE", base+"/v1/sessions/q1", "", &rep); code != http.StatusAccepted || rep.Seq == 0 {
		t.Fatalf("DELETE: %d %+v", code, rep)
	}
	waitFor(t, "the forget command applied", 10*time.Second, func() bool { return s.Engine().Stats().LastSequence >= rep.Seq })
	var res NextResult
	doJSON(t, "GET", base+"/v1/sessions/q1/next", "", &res)
	if res.Tracked || res.Source != SourcePop {
		t.Fatalf("q1 still answers from its clicks: %+v", res)
	}
	shutdown(t, s)
	s = newTestService(t, dir)
	defer shutdown(t, s)
	if _, ok := s.Engine().p.SessionQuery("q1"); ok {
		t.Fatal("q1 came back after a restart")
	}
	base = "http://" + s.HTTPAddr()
	if code := doJSON(t, "DELETE", base+"/v1/sessions/"+strings.Repeat("x", 200), "", nil); code != http.StatusBadRequest {
		t.Fatal("a 200-byte session id should be refused")
	}
}
