package session

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"sync"
	"time"

	"waymark/stream"
)

// Queries never write to the log: an answer is not an impression, since
// the caller (a ranker, a page template) may drop, reorder or never render
// it. What was displayed is reported by the caller, as an authenticated
// write, POST /v1/shown, which goes on the log like every other write so
// that replicas agree and replay sees it. Exploration learns impressions
// from those reports only.

// shownBody is the body of POST /v1/shown: the answer's request id and the
// items displayed, in order. Session is optional: when left out, the
// session of the answer is taken from this replica's memory of recent
// answers (answerLog), if it still holds it.
type shownBody struct {
	Request string   `json:"request"`
	Items   []string `json:"items"`
	Session string   `json:"session,omitempty"`
}

// shownReply answers POST /v1/shown.
type shownReply struct {
	Request string `json:"request"`
	Items   int    `json:"items"`
	// Session is the session the report is credited to, empty when none
	// is known (impressions are counted, a later click is not credited).
	Session string `json:"session,omitempty"`
	Seq     uint64 `json:"seq,omitempty"`
}

func (s *Server) postShown(w http.ResponseWriter, r *http.Request) {
	var b shownBody
	if !s.decodeBody(w, r, &b) {
		return
	}
	if b.Request == "" {
		writeAPIError(w, badParam("request: missing; give the request id of the answer that was shown"))
		return
	}
	rec := stream.Served{Request: b.Request, Items: b.Items, Session: b.Session}
	if err := rec.Validate(); err != nil {
		var fe *stream.FieldError
		if errors.As(err, &fe) {
			err = fmt.Errorf("%s: %s", fe.Field, fe.Reason)
		}
		writeAPIError(w, badParam("%v", err))
		return
	}
	seen := make(map[string]bool, len(b.Items))
	for i, it := range b.Items {
		if seen[it] {
			writeAPIError(w, badParam("items[%d]: %q is listed twice; give each displayed item once, in display order", i, it))
			return
		}
		seen[it] = true
	}
	// Unknown request ids are accepted: the answer may come from another
	// replica, or be older than this one's memory.
	if a, ok := s.answers.get(b.Request); ok {
		if rec.Session == "" {
			rec.Session = a.session
		}
		rec.TS = a.ts
	} else {
		rec.TS = s.eng.watermark()
	}
	reply := shownReply{Request: rec.Request, Items: len(rec.Items), Session: rec.Session}
	if s.pub == nil { // a server without a bus applies the report itself
		s.eng.recordShown(&rec)
		writeJSON(w, http.StatusOK, reply)
		return
	}
	c := stream.Control{Served: &rec}
	if raw, err := json.Marshal(c); err == nil {
		if err := s.fitsBus(len(raw)); err != nil {
			writeAPIError(w, badParam("%v", err))
			return
		}
	}
	ctx, cancel := context.WithTimeout(r.Context(), 10*time.Second)
	defer cancel()
	seq, err := s.pub.PublishControl(ctx, c)
	if err = s.published("served", 1, err); err != nil {
		writeError(w, http.StatusServiceUnavailable, CodeUnavailable, "publish to the bus: "+err.Error())
		return
	}
	reply.Seq = seq
	writeJSON(w, http.StatusAccepted, reply)
}

// answerLogSize bounds the answers an answerLog remembers: at 1,000
// answers a second, about a minute of them, time enough for a page to
// render and report. Each costs a request id and a session id.
const answerLogSize = 1 << 16

// answerLog remembers the session and event time of recent answers to a
// named session, by request id, so a report naming only the request is
// credited to its session. It lives in memory on the replica that
// answered; a report that reaches another replica names no session unless
// the caller gives it. The zero value is ready to use.
type answerLog struct {
	mu   sync.Mutex
	m    map[string]answerRef
	ring []string // request ids, oldest replaced first
	next int
}

type answerRef struct {
	session string
	ts      int64
}

// note remembers an answer to a named session; others have nothing to
// credit and are not kept.
func (l *answerLog) note(session string, res *NextResult) {
	if session == "" {
		return
	}
	l.mu.Lock()
	defer l.mu.Unlock()
	if l.m == nil {
		l.m = make(map[string]answerRef, answerLogSize)
		l.ring = make([]string, answerLogSize)
	}
	if old := l.ring[l.next]; old != "" {
		delete(l.m, old)
	}
	l.ring[l.next] = res.Request
	l.next = (l.next + 1) % len(l.ring)
	l.m[res.Request] = answerRef{session: session, ts: res.TS}
}

func (l *answerLog) get(request string) (answerRef, bool) {
	l.mu.Lock()
	defer l.mu.Unlock()
	a, ok := l.m[request]
	return a, ok
}

// watermark returns the event time of the newest applied event.
func (e *Engine) watermark() int64 {
	e.mu.RLock()
	defer e.mu.RUnlock()
	return e.p.Checkpoint().Watermark
}

// recordShown applies a report of what was shown on this replica only;
// serve puts it on the log instead, where every replica applies it.
func (e *Engine) recordShown(rec *stream.Served) {
	e.mu.Lock()
	defer e.mu.Unlock()
	e.p.Served(rec.Session, rec.Items, rec.TS)
}
