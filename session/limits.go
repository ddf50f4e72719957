package session

import (
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"os"
	"strconv"
	"strings"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"
)

// Limits bound what one client, or many cheap requests, can make the HTTP
// API spend: time per connection, connections, requests answered at once
// and the work one batch buys. A zero field takes its DefaultLimits value;
// a negative one switches that bound off.
type Limits struct {
	// MaxInFlight bounds the API requests (queries and writes) being
	// answered at once; more get 429 with Retry-After. Health, readiness,
	// metrics, stats, the page and the admin routes are not counted, so
	// probes and operators get through an overload.
	MaxInFlight int
	// MaxBatchItems bounds the items one batch asks for: k (or the
	// default k) summed over the requests of POST /v1/next/batch, the
	// candidates summed over those of POST /v1/score/batch. A batch over
	// it gets 413 naming the limit, before any of it is answered.
	MaxBatchItems int
	// MaxConns bounds open HTTP connections; further clients wait in the
	// kernel's accept queue until one closes, so a flood of idle
	// connections cannot take the descriptors the store and the bus need.
	MaxConns int
	// ReadHeaderTimeout bounds reading a request's headers.
	ReadHeaderTimeout time.Duration
	// ReadTimeout bounds reading a whole request, body included: a client
	// that announces a body and stalls is cut after it (408).
	ReadTimeout time.Duration
	// WriteTimeout bounds a request from the end of its headers to the
	// end of its answer; the admin routes, which stream whole exports,
	// are exempt.
	WriteTimeout time.Duration
	// IdleTimeout bounds how long a keep-alive connection waits for its
	// next request.
	IdleTimeout time.Duration
	// MaxHeaderBytes bounds request line and headers; long id lists go
	// in a POST body.
	MaxHeaderBytes int
}

// DefaultLimits returns serve's defaults.
//
//   - MaxInFlight 64: a query takes tens of microseconds on one core, so 64
//     in flight keep any core count busy, while 64 requests at the largest
//     body and batch stay far below the memory budget.
//   - MaxBatchItems 20,000: twice a full batch (maxBatch requests) at the
//     default k of 10; a 1000 x k=1000 batch (1M items, 51 MB of answer in
//     6.8 s, issue 12) is refused.
//   - MaxConns 512: half of the common 1024 descriptor limit (common
//     practice: ulimit -n's default), leaving the rest to Badger's files
//     and the bus.
//   - ReadHeaderTimeout 10 s, ReadTimeout 30 s: a 10 MiB body needs 350
//     KB/s, far below any network a sidecar sits on.
//   - WriteTimeout 2 min: above ReadTimeout plus the largest timeout_ms
//     (60 s) a query may ask for.
//   - IdleTimeout 90 s: Go's http.Transport keeps idle connections for
//     90 s (DefaultTransport's IdleConnTimeout), so pooled clients do not
//     meet a closed connection.
//   - MaxHeaderBytes 64 KiB (common practice: proxies allow 8 to 64 KiB).
func DefaultLimits() Limits {
	return Limits{
		MaxInFlight:       64,
		MaxBatchItems:     20_000,
		MaxConns:          512,
		ReadHeaderTimeout: 10 * time.Second,
		ReadTimeout:       30 * time.Second,
		WriteTimeout:      2 * time.Minute,
		IdleTimeout:       90 * time.Second,
		MaxHeaderBytes:    64 << 10,
	}
}

// withDefaults fills zero fields from DefaultLimits.
func (l Limits) withDefaults() Limits {
	d := DefaultLimits()
	fill := func(v *int, def int) {
		if *v == 0 {
			*v = def
		}
	}
	fillD := func(v *time.Duration, def time.Duration) {
		if *v == 0 {
			*v = def
		}
	}
	fill(&l.MaxInFlight, d.MaxInFlight)
	fill(&l.MaxBatchItems, d.MaxBatchItems)
	fill(&l.MaxConns, d.MaxConns)
	fill(&l.MaxHeaderBytes, d.MaxHeaderBytes)
	fillD(&l.ReadHeaderTimeout, d.ReadHeaderTimeout)
	fillD(&l.ReadTimeout, d.ReadTimeout)
	fillD(&l.WriteTimeout, d.WriteTimeout)
	fillD(&l.IdleTimeout, d.IdleTimeout)
	return l
}

// Error codes of the limits, in the API's {"error":{"code","message"}}.
const (
	// CodeOverloaded: more requests in flight than the server answers at
	// once; retry after the Retry-After seconds (429).
	CodeOverloaded = "overloaded"
	// CodeBatchTooLarge: a batch asks for more items than one request may
	// (413).
	CodeBatchTooLarge = "batch_too_large"
	// CodeRequestTimeout: the body did not arrive within the read timeout
	// (408).
	CodeRequestTimeout = "request_timeout"
)

// limiter holds the server's in-flight count and the metrics of the limits
// and of publishing.
type limiter struct {
	sem            chan struct{} // nil: no cap
	inflight       prometheus.Gauge
	overloaded     prometheus.Counter
	publishFailure *prometheus.CounterVec
}

func newLimiter(l Limits, reg prometheus.Registerer) *limiter {
	lim := &limiter{
		inflight: prometheus.NewGauge(prometheus.GaugeOpts{
			Name: "waymark_http_inflight_requests", Help: "API requests being answered now (those the in-flight cap counts).",
		}),
		overloaded: prometheus.NewCounter(prometheus.CounterOpts{
			Name: "waymark_http_overloaded_total", Help: "API requests refused with 429 because the in-flight cap was reached.",
		}),
		publishFailure: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "waymark_publish_failures_total", Help: "Writes the bus did not take, by kind (events, items, forget, served); each is also logged at WARN.",
		}, []string{"kind"}),
	}
	for _, kind := range []string{"events", "items", "forget", "served"} {
		lim.publishFailure.WithLabelValues(kind) // a series at 0 from the start, so rate() and alerts see the first failure
	}
	if l.MaxInFlight > 0 {
		lim.sem = make(chan struct{}, l.MaxInFlight)
	}
	if reg != nil {
		reg.MustRegister(lim.inflight, lim.overloaded, lim.publishFailure)
	}
	return lim
}

// capped reports whether the in-flight cap counts requests of pattern:
// the query and write routes under /v1/, not stats or admin.
func capped(pattern string) bool {
	_, path, _ := strings.Cut(pattern, " ")
	return strings.HasPrefix(path, "/v1/") && path != "/v1/stats" && !strings.HasPrefix(path, "/v1/admin/")
}

// admit runs before every routed handler. It lifts the write deadline of
// the admin routes, which stream whole exports, and takes an in-flight
// slot for capped routes, answering 429 itself when none is free. The
// caller runs release when the handler is done.
//
// A capped request's body is read before its slot is taken: a client that
// stalls its body then holds a connection until the read timeout, not one
// of the few slots that answer everybody.
//
// Once the request is read whole, the read deadline is lifted: net/http
// watches the connection with a background read under the same deadline
// and cancels the request's context when it fires, which would cut a
// snapshot to the bus or a slow publish at ReadTimeout. The handler stays
// bounded by WriteTimeout; the next request sets its own deadlines.
func (s *Server) admit(pattern string, w http.ResponseWriter, r *http.Request) (release func(), ok bool) {
	rc := http.NewResponseController(w)
	if strings.Contains(pattern, " /v1/admin/") {
		_ = rc.SetWriteDeadline(time.Time{})
	}
	read := r.ContentLength == 0 || r.Body == nil || r.Body == http.NoBody
	if !capped(pattern) || s.lim.sem == nil {
		if read {
			_ = rc.SetReadDeadline(time.Time{})
		}
		return func() {}, true
	}
	if !read {
		b, ok := s.readBody(w, r)
		if !ok {
			return nil, false
		}
		r.Body = &prereadBody{b: b}
	}
	_ = rc.SetReadDeadline(time.Time{})
	select {
	case s.lim.sem <- struct{}{}:
	default:
		s.lim.overloaded.Inc()
		w.Header().Set("Retry-After", "1")
		writeError(w, http.StatusTooManyRequests, CodeOverloaded,
			fmt.Sprintf("%d requests are in flight, the most this server answers at once (serve --max-inflight); retry after 1 s", cap(s.lim.sem)))
		return nil, false
	}
	s.lim.inflight.Inc()
	return func() {
		s.lim.inflight.Dec()
		<-s.lim.sem
	}, true
}

// prereadBody is a body admit has already read; readBody takes its bytes
// as they are.
type prereadBody struct {
	b   []byte
	off int
}

func (p *prereadBody) Read(b []byte) (int, error) {
	if p.off >= len(p.b) {
		return 0, io.EOF
	}
	n := copy(b, p.b[p.off:])
	p.off += n
	return n, nil
}

func (p *prereadBody) Close() error { return nil }

// batchItems is the work a batch asks for: k (or the default) per next
// request, candidates per score request. A k out of range counts as the
// largest allowed; that request fails on its own anyway.
func (s *Server) batchItems(reqs any) int {
	n := 0
	switch rs := reqs.(type) {
	case []nextBody:
		for i := range rs {
			k := s.opts.DefaultK
			if rs[i].K != nil {
				k = max(0, min(*rs[i].K, s.opts.MaxK))
			}
			n += k
		}
	case []scoreBody:
		for i := range rs {
			n += len(rs[i].Candidates)
		}
	}
	return n
}

// checkBatchBudget refuses a batch that asks for more items than
// MaxBatchItems, before any of it is answered.
func checkBatchBudget[Req any](s *Server, reqs []Req) *apiError {
	limit := s.opts.Limits.MaxBatchItems
	if limit < 0 {
		return nil
	}
	if n := s.batchItems(reqs); n > limit {
		what := "k"
		if _, ok := any(reqs).([]scoreBody); ok {
			what = "candidates"
		}
		return &apiError{Code: CodeBatchTooLarge, status: http.StatusRequestEntityTooLarge,
			Message: fmt.Sprintf("the batch asks for %d items (%s summed over its %d requests); at most %d per batch (serve --max-batch-items): split it", n, what, len(reqs), limit)}
	}
	return nil
}

// readTimedOut reports whether a body read failed on the read deadline.
func readTimedOut(err error) bool {
	var ne net.Error
	return errors.Is(err, os.ErrDeadlineExceeded) || (errors.As(err, &ne) && ne.Timeout())
}

// maxEchoBytes bounds how much of a request's path an error repeats.
const maxEchoBytes = 128

// echo returns s cut to maxEchoBytes, for error messages that repeat what
// the client sent: a 404 for a megabyte path answers in a few hundred
// bytes.
func echo(s string) string {
	if len(s) <= maxEchoBytes {
		return s
	}
	n := maxEchoBytes
	for n > 0 && s[n]&0xC0 == 0x80 { // do not cut a UTF-8 sequence
		n--
	}
	return s[:n] + "… (" + strconv.Itoa(len(s)) + " bytes)"
}

// newHTTPServer returns the http.Server of the API with the limits' timeouts.
func newHTTPServer(h http.Handler, l Limits, log *slog.Logger) *http.Server {
	pos := func(d time.Duration) time.Duration { return max(d, 0) } // negative: none, as http.Server reads 0
	srv := &http.Server{
		Handler:           h,
		ReadHeaderTimeout: pos(l.ReadHeaderTimeout),
		ReadTimeout:       pos(l.ReadTimeout),
		WriteTimeout:      pos(l.WriteTimeout),
		IdleTimeout:       pos(l.IdleTimeout),
		MaxHeaderBytes:    max(l.MaxHeaderBytes, 0),
	}
	if log != nil {
		srv.ErrorLog = slog.NewLogLogger(log.Handler(), slog.LevelWarn)
	}
	return srv
}

// limitListener accepts at most n connections open at once; Accept waits
// for one to close. (golang.org/x/net/netutil.LimitListener does the
// same; it is not in this module's graph.)
type limitListener struct {
	net.Listener
	sem       chan struct{}
	done      chan struct{}
	closeOnce sync.Once
}

// limitListen wraps ln; n <= 0 leaves it unbounded. With reg it also
// registers a gauge of the connections open.
func limitListen(ln net.Listener, n int, reg prometheus.Registerer) net.Listener {
	if n <= 0 {
		return ln
	}
	l := &limitListener{Listener: ln, sem: make(chan struct{}, n), done: make(chan struct{})}
	if reg != nil {
		reg.MustRegister(prometheus.NewGaugeFunc(prometheus.GaugeOpts{
			Name: "waymark_http_open_connections", Help: "Open HTTP connections (bounded by serve --max-conns).",
		}, func() float64 { return float64(len(l.sem)) }))
	}
	return l
}

func (l *limitListener) Accept() (net.Conn, error) {
	select {
	case l.sem <- struct{}{}:
	case <-l.done:
		return nil, net.ErrClosed
	}
	c, err := l.Listener.Accept()
	if err != nil {
		<-l.sem
		return nil, err
	}
	return &limitConn{Conn: c, release: func() { <-l.sem }}, nil
}

func (l *limitListener) Close() error {
	err := l.Listener.Close()
	l.closeOnce.Do(func() { close(l.done) })
	return err
}

type limitConn struct {
	net.Conn
	once    sync.Once
	release func()
}

func (c *limitConn) Close() error {
	err := c.Conn.Close()
	c.once.Do(c.release)
	return err
}
