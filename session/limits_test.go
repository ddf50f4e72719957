package session

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"net/http/httptest"
	"os"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
)

// rawRequest opens a TCP connection to addr and writes req as it is. The
// caller closes it before the service shuts down, which waits for open
// requests.
func rawRequest(t *testing.T, addr, req string) net.Conn {
	t.Helper()
	c, err := net.DialTimeout("tcp", addr, 5*time.Second)
	if err != nil {
		t.Fatal(err)
	}
	if req != "" {
		if _, err := io.WriteString(c, req); err != nil {
			t.Fatal(err)
		}
	}
	return c
}

// readUntilClosed reads c until the server closes it or limit passes, and
// returns what came and whether the server closed it.
func readUntilClosed(c net.Conn, limit time.Duration) (string, bool) {
	_ = c.SetReadDeadline(time.Now().Add(limit))
	b, err := io.ReadAll(c)
	var ne net.Error
	if errors.As(err, &ne) && ne.Timeout() {
		return string(b), false
	}
	return string(b), true // EOF or reset: the server let go of it
}

// stalledBody is a request that announces a 1 MB body and sends 10 bytes
// of it, as the state-slowbody acceptance check does.
func stalledBody(path string) string {
	return "POST " + path + " HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\nContent-Length: 1000000\r\n\r\n{\"session\""
}

// metricValue reads a gauge or counter from reg, the first series with
// the given label name/value pairs.
func metricValue(t *testing.T, reg prometheus.Gatherer, name string, labels ...string) float64 {
	t.Helper()
	mfs, err := reg.Gather()
	if err != nil {
		t.Fatal(err)
	}
	for _, mf := range mfs {
		if mf.GetName() != name {
			continue
		}
	next:
		for _, m := range mf.GetMetric() {
			for i := 0; i+1 < len(labels); i += 2 {
				found := false
				for _, lp := range m.GetLabel() {
					if lp.GetName() == labels[i] && lp.GetValue() == labels[i+1] {
						found = true
					}
				}
				if !found {
					continue next
				}
			}
			switch {
			case m.Gauge != nil:
				return m.Gauge.GetValue()
			case m.Counter != nil:
				return m.Counter.GetValue()
			}
		}
	}
	return 0
}

// TestStalledBodiesAreCut: clients that announce a large body and stall
// are answered 408 and disconnected after the read timeout, on every
// route, instead of holding their connection (and a descriptor) for ever
// (issue 12: 500 such connections were never closed). The read timeout is
// 1 s here so the test is quick; the default (30 s) is pinned below.
func TestStalledBodiesAreCut(t *testing.T) {
	s := newTestService(t, t.TempDir(), func(o *ServiceOptions) { o.Limits.ReadTimeout = time.Second })
	defer shutdown(t, s)
	paths := []string{"/v1/events", "/v1/items", "/v1/next", "/v1/next/batch", "/v1/score", "/v1/nothing-here"}
	var conns []net.Conn
	defer func() {
		for _, c := range conns {
			_ = c.Close()
		}
	}()
	for i := 0; i < 20; i++ {
		conns = append(conns, rawRequest(t, s.HTTPAddr(), stalledBody(paths[i%len(paths)])))
	}
	for i, c := range conns {
		// 20 s: far above the 1 s timeout, so only a missing timeout fails.
		got, closed := readUntilClosed(c, 20*time.Second)
		if !closed {
			t.Fatalf("connection %d (%s): still open 20 s after a stalled body (read timeout 1 s); got %q", i, paths[i%len(paths)], got)
		}
		if paths[i%len(paths)] != "/v1/nothing-here" && (!strings.HasPrefix(got, "HTTP/1.1 408") || !strings.Contains(got, CodeRequestTimeout)) {
			t.Errorf("connection %d (%s): want a 408 %s answer before the close, got %q", i, paths[i%len(paths)], CodeRequestTimeout, got)
		}
	}
}

// TestDefaultLimitsBound: serve's defaults set every timeout, and cut a
// stalled body well within the 60 s the state-slowbody check allows.
func TestDefaultLimitsBound(t *testing.T) {
	l := DefaultServiceOptions().Limits.withDefaults()
	srv := newHTTPServer(http.NotFoundHandler(), l, nil)
	if srv.ReadTimeout <= 0 || srv.ReadTimeout > 30*time.Second {
		t.Errorf("ReadTimeout %s: want 0 < t <= 30 s (a stalled body cut well within 60 s)", srv.ReadTimeout)
	}
	for name, d := range map[string]time.Duration{"ReadHeaderTimeout": srv.ReadHeaderTimeout, "WriteTimeout": srv.WriteTimeout, "IdleTimeout": srv.IdleTimeout} {
		if d <= 0 {
			t.Errorf("%s is %s: unset", name, d)
		}
	}
	if srv.WriteTimeout <= srv.ReadTimeout+60*time.Second {
		t.Errorf("WriteTimeout %s must exceed ReadTimeout %s plus the largest timeout_ms (60 s)", srv.WriteTimeout, srv.ReadTimeout)
	}
	if l.MaxConns <= 0 || l.MaxInFlight <= 0 || l.MaxBatchItems <= 0 {
		t.Errorf("default caps must be on: %+v", l)
	}
}

// TestConnectionCap: with MaxConns open connections, the next client is
// not served until one closes; then it is. The bound keeps a flood of idle
// connections from taking every descriptor (issue 12: at 1,100 the
// process ran out of them).
func TestConnectionCap(t *testing.T) {
	const max = 4
	s := newTestService(t, t.TempDir(), func(o *ServiceOptions) { o.Limits.MaxConns = max })
	defer shutdown(t, s)
	var held []net.Conn
	defer func() {
		for _, c := range held {
			_ = c.Close()
		}
	}()
	// Each held connection gets one answer, so it is surely accepted, and
	// then stays open, idle, as a pooled client keeps it.
	for i := 0; i < max; i++ {
		c := rawRequest(t, s.HTTPAddr(), "GET /healthz HTTP/1.1\r\nHost: x\r\n\r\n")
		held = append(held, c)
		_ = c.SetReadDeadline(time.Now().Add(10 * time.Second))
		resp, err := http.ReadResponse(bufio.NewReader(c), nil)
		if err != nil {
			t.Fatalf("held connection %d: %v", i, err)
		}
		resp.Body.Close()
	}
	if got := metricValue(t, s.reg, "waymark_http_open_connections"); got != max {
		t.Errorf("waymark_http_open_connections = %v, want %d", got, max)
	}
	c := rawRequest(t, s.HTTPAddr(), "GET /healthz HTTP/1.1\r\nHost: x\r\nConnection: close\r\n\r\n")
	held = append(held, c)
	_ = c.SetReadDeadline(time.Now().Add(300 * time.Millisecond))
	if n, err := c.Read(make([]byte, 1)); err == nil || n > 0 {
		t.Fatalf("connection %d was served while %d were open (cap %d)", max+1, max, max)
	}
	_ = held[0].Close()
	_ = c.SetReadDeadline(time.Now().Add(10 * time.Second))
	resp, err := http.ReadResponse(bufio.NewReader(c), nil)
	if err != nil {
		t.Fatalf("after one connection closed, the waiting one got no answer: %v", err)
	}
	resp.Body.Close()
	if resp.StatusCode != 200 {
		t.Fatalf("GET /healthz: %d", resp.StatusCode)
	}
}

// TestInFlightCap: over MaxInFlight requests in flight, an API request
// gets 429 with Retry-After and the JSON error naming the cap; probes and
// stats still answer; clients stalling their bodies hold no slot.
func TestInFlightCap(t *testing.T) {
	const max = 2
	s := newTestService(t, t.TempDir(), func(o *ServiceOptions) {
		o.Limits.MaxInFlight = max
		o.Limits.ReadTimeout = time.Minute // the stalled bodies below stay stalled for the whole test
	})
	defer shutdown(t, s)
	base := "http://" + s.HTTPAddr()
	next := func() (int, http.Header, string) {
		resp, err := http.Post(base+"/v1/next", "application/json", strings.NewReader(`{"items":["a"],"k":3}`))
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		b, _ := io.ReadAll(resp.Body)
		return resp.StatusCode, resp.Header, string(b)
	}
	// Five stalled bodies: more than the cap, yet none holds a slot.
	var stalled []net.Conn
	defer func() {
		for _, c := range stalled {
			_ = c.Close()
		}
	}()
	for i := 0; i < 5; i++ {
		stalled = append(stalled, rawRequest(t, s.HTTPAddr(), stalledBody("/v1/next")))
	}
	if code, _, body := next(); code != 200 {
		t.Fatalf("with 5 stalled bodies and no request in flight: %d %s", code, body)
	}
	// Take every slot as requests being answered would.
	var releases []func()
	for i := 0; i < max; i++ {
		rel, ok := s.api.admit("POST /v1/next", httptest.NewRecorder(), &http.Request{})
		if !ok {
			t.Fatalf("slot %d of %d not free", i+1, max)
		}
		releases = append(releases, rel)
	}
	code, hdr, body := next()
	if code != http.StatusTooManyRequests || hdr.Get("Retry-After") == "" || !strings.Contains(body, CodeOverloaded) || !strings.Contains(body, fmt.Sprint(max)) {
		t.Fatalf("over the cap: want 429, Retry-After and %q naming %d; got %d %v %s", CodeOverloaded, max, code, hdr, body)
	}
	for _, path := range []string{"/healthz", "/readyz", "/v1/stats", "/metrics"} {
		resp, err := http.Get(base + path)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		if resp.StatusCode == http.StatusTooManyRequests {
			t.Errorf("GET %s: 429; probes and stats must answer under overload", path)
		}
	}
	if got := metricValue(t, s.reg, "waymark_http_overloaded_total"); got != 1 {
		t.Errorf("waymark_http_overloaded_total = %v, want 1", got)
	}
	for _, rel := range releases {
		rel()
	}
	if code, _, body := next(); code != 200 {
		t.Fatalf("after the slots were released: %d %s", code, body)
	}
}

// TestBatchBudget: a batch is refused whole (413, the limit named) when
// the items it asks for (k summed over next requests, candidates over
// score requests) exceed MaxBatchItems; at the limit it is answered. At
// the defaults, issue 12's 1,000 requests of k=1000 (51 MB of answer in
// 6.8 s) are refused and a full batch at the default k is answered.
func TestBatchBudget(t *testing.T) {
	s := newTestService(t, t.TempDir())
	defer shutdown(t, s)
	base := "http://" + s.HTTPAddr()
	limit := DefaultLimits().MaxBatchItems
	nextBatch := func(n int, k string) string {
		var b strings.Builder
		b.WriteString(`{"requests":[`)
		for i := 0; i < n; i++ {
			if i > 0 {
				b.WriteByte(',')
			}
			fmt.Fprintf(&b, `{"items":["p%d","p%d"]%s}`, i, i+1, k)
		}
		b.WriteString(`]}`)
		return b.String()
	}
	scoreBatch := func(n, cands int) string {
		c := make([]string, cands)
		for i := range c {
			c[i] = fmt.Sprintf("%q", fmt.Sprintf("c%d", i))
		}
		one := `{"items":["a"],"candidates":[` + strings.Join(c, ",") + `]}`
		return `{"requests":[` + strings.TrimSuffix(strings.Repeat(one+",", n), ",") + `]}`
	}
	tests := []struct {
		name, path, body string
		code             int
	}{
		{"1000 x k=1000 (issue 12)", "/v1/next/batch", nextBatch(1000, `,"k":1000`), 413},
		{"1000 x default k", "/v1/next/batch", nextBatch(1000, ""), 200},
		{"at the limit", "/v1/next/batch", nextBatch(limit/1000, `,"k":1000`), 200},
		{"one request over", "/v1/next/batch", nextBatch(limit/1000+1, `,"k":1000`), 413},
		{"k out of range counts as the largest", "/v1/next/batch", nextBatch(limit/1000+1, `,"k":5000000`), 413},
		{"score at the limit", "/v1/score/batch", scoreBatch(limit/10_000, 10_000), 200},
		{"score over", "/v1/score/batch", scoreBatch(limit/10_000+1, 10_000), 413},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			resp, err := http.Post(base+tt.path, "application/json", strings.NewReader(tt.body))
			if err != nil {
				t.Fatal(err)
			}
			defer resp.Body.Close()
			b, _ := io.ReadAll(resp.Body)
			if resp.StatusCode != tt.code {
				t.Fatalf("%d, want %d: %.300s", resp.StatusCode, tt.code, b)
			}
			if tt.code == 413 && (!strings.Contains(string(b), CodeBatchTooLarge) || !strings.Contains(string(b), fmt.Sprint(limit))) {
				t.Fatalf("the error must carry %q and name the limit %d: %s", CodeBatchTooLarge, limit, b)
			}
		})
	}
}

// TestNotFoundEchoBounded: a 404 repeats at most maxEchoBytes of the path,
// so a long path does not buy a long answer.
func TestNotFoundEchoBounded(t *testing.T) {
	s := newTestService(t, t.TempDir())
	defer shutdown(t, s)
	path := "/" + strings.Repeat("x", 60_000) // under the 64 KiB header limit
	resp, err := http.Get("http://" + s.HTTPAddr() + path)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	if resp.StatusCode != 404 || len(b) > 1024 || !strings.Contains(string(b), "60001 bytes") {
		t.Fatalf("want a 404 under 1 KiB that gives the path's length; got %d, %d bytes: %.200s", resp.StatusCode, len(b), b)
	}
}

// TestReadsRejectIDsWritesReject: an id with a control character is
// refused by reads as by writes (400), so no query or forget publishes a
// record the log then dead-letters (issue 12).
func TestReadsRejectIDsWritesReject(t *testing.T) {
	s := newTestService(t, t.TempDir())
	defer shutdown(t, s)
	base := "http://" + s.HTTPAddr()
	tests := []struct{ method, path, body string }{
		{"GET", "/v1/sessions/a%00b/next", ""},
		{"GET", "/v1/sessions/a%0Ab/next", ""},
		{"DELETE", "/v1/sessions/a%00b", ""},
		{"GET", "/v1/items/a%0Ab/neighbors", ""},
		{"GET", "/v1/sessions/s1/next?exclude=a%00b", ""},
		{"POST", "/v1/next", `{"session":"a\u0000b"}`},
		{"POST", "/v1/next", `{"items":["x\ny"]}`},
		{"POST", "/v1/next", `{"items":["x"],"exclude":["\u0007"]}`},
		{"POST", "/v1/next", `{"items":["x"],"prefer":{"items":["a\u001fb"]}}`},
		{"POST", "/v1/score", `{"items":["x"],"candidates":["a\u0000"]}`},
		{"POST", "/v1/next/batch", `{"requests":[{"items":["a\nb"]}]}`},
	}
	for _, tt := range tests {
		var rep struct {
			Error   *apiError    `json:"error"`
			Results []batchEntry `json:"results"`
		}
		code := doJSON(t, tt.method, base+tt.path, tt.body, &rep)
		if strings.HasSuffix(tt.path, "/batch") {
			if code != 200 || len(rep.Results) != 1 || rep.Results[0].Error == nil || !strings.Contains(rep.Results[0].Error.Message, "control character") {
				t.Errorf("%s %s %s: want the entry's error naming the control character; got %d %+v", tt.method, tt.path, tt.body, code, rep)
			}
			continue
		}
		if code != 400 || rep.Error == nil || !strings.Contains(rep.Error.Message, "control character") {
			t.Errorf("%s %s %s: want 400 naming the control character; got %d %+v", tt.method, tt.path, tt.body, code, rep.Error)
		}
	}
}

// TestReadTimedOut pins the check readBody uses to answer 408.
func TestReadTimedOut(t *testing.T) {
	if !readTimedOut(fmt.Errorf("read: %w", os.ErrDeadlineExceeded)) || readTimedOut(io.ErrUnexpectedEOF) {
		t.Fatal("readTimedOut misreads deadline errors")
	}
}
