package session

import (
	"bytes"
	"context"
	"crypto/subtle"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"strconv"
	"strings"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promhttp"

	"waymark/stream"
)

// Publisher puts writes on the bus; the engine learns them from there, so
// every replica sees the same log.
type Publisher interface {
	PublishEvents(ctx context.Context, evs []stream.Event) error
	PublishItems(ctx context.Context, recs []stream.ItemRecord) error
	PublishControl(ctx context.Context, c stream.Control) (uint64, error)
	PublishControlAsync(c stream.Control) error
}

// ServerOptions configures the HTTP API.
type ServerOptions struct {
	// MaxBody bounds request bodies (default 10 MiB); larger get 413.
	MaxBody int64
	// MaxK bounds k (default 1000).
	MaxK int
	// DefaultK is k when the request gives none (default 10).
	DefaultK int
	// Ready reports readiness for /readyz with a reason when not ready.
	Ready func() (bool, string)
	// Token, when set, is the bearer token write and admin requests
	// must carry (Authorization: Bearer <token>).
	Token string
	// Snapshot stores a snapshot for new replicas (nil: the admin
	// endpoint answers 503).
	Snapshot func(ctx context.Context) (stream.SnapshotInfo, error)
	// Gatherer serves /metrics (nil: no metrics endpoint).
	Gatherer   prometheus.Gatherer
	Registerer prometheus.Registerer
	Logger     *slog.Logger
	// Limits bound in-flight requests and batch work (limits.go).
	Limits Limits
}

func (o *ServerOptions) validate() {
	if o.MaxBody == 0 {
		o.MaxBody = 10 << 20
	}
	if o.MaxK == 0 {
		o.MaxK = 1000
	}
	if o.DefaultK == 0 {
		o.DefaultK = 10
	}
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
	if o.Ready == nil {
		o.Ready = func() (bool, string) { return true, "" }
	}
	o.Limits = o.Limits.withDefaults()
}

// Server is the HTTP API over an engine.
type Server struct {
	opts     ServerOptions
	eng      *Engine
	pub      Publisher
	mux      *http.ServeMux
	requests *prometheus.CounterVec
	rejected prometheus.Counter
	bufs     sync.Pool // *[]byte response buffers of postNext
	hist     *history  // recent figures for the operator page's charts
	answers  answerLog // recent answers' sessions, for POST /v1/shown (shown.go)
	lim      *limiter
}

// NewServer returns the HTTP API; pub may be nil for a read-only server.
func NewServer(eng *Engine, pub Publisher, opts ServerOptions) *Server {
	opts.validate()
	s := &Server{opts: opts, eng: eng, pub: pub, mux: http.NewServeMux(), hist: newHistory(0, nil)}
	s.requests = prometheus.NewCounterVec(prometheus.CounterOpts{
		Name: "waymark_http_requests_total", Help: "HTTP requests by route and status code.",
	}, []string{"route", "code"})
	s.rejected = prometheus.NewCounter(prometheus.CounterOpts{
		Name: "waymark_http_events_rejected_total", Help: "Events and records rejected by HTTP ingest before reaching the bus.",
	})
	if opts.Registerer != nil {
		opts.Registerer.MustRegister(s.requests, s.rejected)
	}
	s.lim = newLimiter(opts.Limits, opts.Registerer)
	s.route("POST /v1/events", s.guard(s.postEvents))
	s.route("POST /v1/items", s.guard(s.postItems))
	s.route("GET /v1/sessions/{id}/next", s.sessionNext)
	s.route("DELETE /v1/sessions/{id}", s.guard(s.forgetSession))
	s.route("POST /v1/shown", s.guard(s.postShown))
	s.route("POST /v1/next", s.postNext)
	s.route("POST /v1/score", s.postScore)
	s.route("POST /v1/next/batch", s.postNextBatch)
	s.route("POST /v1/score/batch", s.postScoreBatch)
	s.route("GET /v1/items/{id}/neighbors", s.neighbors)
	s.route("GET /v1/popular", s.popular)
	s.route("GET /v1/stats", s.stats)
	s.route("POST /v1/admin/snapshot", s.guard(s.snapshot))
	s.route("GET /v1/admin/priors", s.guard(s.exportPriors))
	s.route("GET /healthz", func(w http.ResponseWriter, r *http.Request) {
		writeJSON(w, http.StatusOK, map[string]string{"status": "ok"})
	})
	s.route("GET /readyz", s.readyz)
	s.route("GET /{$}", s.page)
	if opts.Gatherer != nil {
		s.mux.Handle("GET /metrics", promhttp.HandlerFor(opts.Gatherer, promhttp.HandlerOpts{}))
	}
	s.mux.HandleFunc(catchAll, s.noRoute)
	return s
}

// ServeHTTP implements http.Handler.
func (s *Server) ServeHTTP(w http.ResponseWriter, r *http.Request) { s.mux.ServeHTTP(w, r) }

type statusWriter struct {
	http.ResponseWriter
	code int
}

func (w *statusWriter) WriteHeader(code int) {
	w.code = code
	w.ResponseWriter.WriteHeader(code)
}

// Unwrap lets http.ResponseController reach the connection's deadlines.
func (w *statusWriter) Unwrap() http.ResponseWriter { return w.ResponseWriter }

func (s *Server) route(pattern string, h http.HandlerFunc) {
	query := strings.Contains(pattern, "/next") || strings.Contains(pattern, "/score")
	s.mux.HandleFunc(pattern, func(w http.ResponseWriter, r *http.Request) {
		sw := &statusWriter{ResponseWriter: w, code: http.StatusOK}
		start := time.Now()
		defer func() {
			if query {
				s.hist.observe(time.Since(start))
			}
			s.hist.maybeSample(s.eng.counters, false)
			if p := recover(); p != nil {
				s.opts.Logger.Error("handler panic", "route", pattern, "panic", fmt.Sprint(p))
				writeError(sw, http.StatusInternalServerError, CodeInternal, "internal error")
			}
			s.requests.WithLabelValues(pattern, strconv.Itoa(sw.code)).Inc()
		}()
		r.Body = http.MaxBytesReader(sw, r.Body, s.opts.MaxBody)
		release, ok := s.admit(pattern, sw, r)
		if !ok {
			return
		}
		defer release()
		h(sw, r)
	})
}

// PriorsFormat names the priors export format in its header line.
const PriorsFormat = "waymark-priors"

// guard requires the bearer token on write and admin routes, and refuses
// writes while the state has a fault (refuseWrites).
func (s *Server) guard(h http.HandlerFunc) http.HandlerFunc {
	h = s.refuseWrites(h)
	if s.opts.Token == "" {
		return h
	}
	want := []byte("Bearer " + s.opts.Token)
	return func(w http.ResponseWriter, r *http.Request) {
		got := []byte(r.Header.Get("Authorization"))
		if subtle.ConstantTimeCompare(got, want) != 1 {
			w.Header().Set("WWW-Authenticate", `Bearer realm="waymark"`)
			writeError(w, http.StatusUnauthorized, CodeUnauthorized, "this endpoint needs Authorization: Bearer <token>")
			return
		}
		h(w, r)
	}
}

// refuseWrites answers 503 to a write while the engine reports a fault
// (faults.go): a 2xx on a write means it will be applied, and a faulted
// state does not apply what it is sent.
func (s *Server) refuseWrites(h http.HandlerFunc) http.HandlerFunc {
	return func(w http.ResponseWriter, r *http.Request) {
		if r.Method != http.MethodGet && r.Method != http.MethodHead {
			if fs := s.eng.Faults(); len(fs) > 0 {
				writeError(w, http.StatusServiceUnavailable, CodeUnavailable, "writes refused: "+faultText(fs))
				return
			}
		}
		h(w, r)
	}
}

func writeJSON(w http.ResponseWriter, code int, v any) {
	w.Header().Set("Content-Type", "application/json")
	w.WriteHeader(code)
	_ = json.NewEncoder(w).Encode(v)
}

func writeError(w http.ResponseWriter, code int, errCode, msg string) {
	writeJSON(w, code, errorReply{Error: apiError{Code: errCode, Message: msg}})
}

// readBody reads the whole body, answering 413 or 400 itself on failure.
func (s *Server) readBody(w http.ResponseWriter, r *http.Request) ([]byte, bool) {
	if pr, ok := r.Body.(*prereadBody); ok {
		return pr.b, true
	}
	b, err := io.ReadAll(r.Body)
	if err != nil {
		var mbe *http.MaxBytesError
		if errors.As(err, &mbe) {
			writeError(w, http.StatusRequestEntityTooLarge, CodeBodyTooLarge,
				fmt.Sprintf("request body exceeds %d bytes", mbe.Limit))
			return nil, false
		}
		if readTimedOut(err) {
			writeError(w, http.StatusRequestTimeout, CodeRequestTimeout,
				fmt.Sprintf("the body did not arrive within %s (serve's read timeout)", s.opts.Limits.ReadTimeout))
			return nil, false
		}
		writeError(w, http.StatusBadRequest, CodeInvalidJSON, "reading body: "+err.Error())
		return nil, false
	}
	return b, true
}

// decodeBody reads the body and decodes it into v, answering 413 or 400
// itself on failure.
func (s *Server) decodeBody(w http.ResponseWriter, r *http.Request, v any) bool {
	b, ok := s.readBody(w, r)
	if !ok {
		return false
	}
	return decodeJSONBody(w, b, v)
}

// decodeJSONBody decodes b into v with unmarshalBody, answering 400 itself
// on failure.
func decodeJSONBody(w http.ResponseWriter, b []byte, v any) bool {
	if err := unmarshalBody(b, v); err != nil {
		writeError(w, http.StatusBadRequest, CodeInvalidJSON, "body: "+err.Error())
		return false
	}
	return true
}

// parseK reads k from a query string value ("" gives the default).
func (s *Server) parseK(raw string) (int, error) {
	if raw == "" {
		return s.opts.DefaultK, nil
	}
	k, err := strconv.Atoi(raw)
	if err != nil || k < 1 || k > s.opts.MaxK {
		return 0, fmt.Errorf("k=%q: must be an integer from 1 to %d", raw, s.opts.MaxK)
	}
	return k, nil
}

func (s *Server) checkK(k *int) (int, error) {
	if k == nil {
		return s.opts.DefaultK, nil
	}
	if *k < 1 || *k > s.opts.MaxK {
		return 0, fmt.Errorf("k=%d: must be from 1 to %d", *k, s.opts.MaxK)
	}
	return *k, nil
}

// validID applies the write rules to an id a request names, so a read
// never takes an id the log would reject (and, before, dead-letter).
func validID(what, id string, maxLen int) error {
	if id == "" || len(id) > maxLen {
		return fmt.Errorf("%s id must be 1 to %d bytes, got %d", what, maxLen, len(id))
	}
	if err := stream.CheckID(what, id, maxLen); err != nil {
		var fe *stream.FieldError
		if errors.As(err, &fe) {
			return fmt.Errorf("%s id %s", what, fe.Reason)
		}
		return err
	}
	return nil
}

func (s *Server) sessionNext(w http.ResponseWriter, r *http.Request) {
	q := r.URL.Query()
	b := nextBody{Session: r.PathValue("id"), Category: q.Get("category")}
	if b.Session == "" {
		writeAPIError(w, badParam("session id is empty"))
		return
	}
	if raw := q.Get("k"); raw != "" {
		k, err := s.parseK(raw)
		if err != nil {
			writeAPIError(w, badParam("%v", err))
			return
		}
		b.K = &k
	}
	var err error
	if b.Keep, err = parseBool(q.Get("keep_session_items")); err != nil {
		writeAPIError(w, badParam("%v", err))
		return
	}
	if v := q.Get("exclude"); v != "" {
		b.Exclude = strings.Split(v, ",")
	}
	if v := q.Get("context"); v != "" {
		b.Context = strings.Split(v, ",")
	}
	if v := q.Get("timeout_ms"); v != "" {
		if b.TimeoutMS, err = strconv.Atoi(v); err != nil {
			writeAPIError(w, badParam("timeout_ms=%q: not an integer", v))
			return
		}
	}
	res, aerr := s.doNext(b)
	if aerr != nil {
		writeAPIError(w, aerr)
		return
	}
	writeJSON(w, http.StatusOK, res)
}

func parseBool(raw string) (bool, error) {
	if raw == "" {
		return false, nil
	}
	b, err := strconv.ParseBool(raw)
	if err != nil {
		return false, fmt.Errorf("keep_session_items=%q: must be true or false", raw)
	}
	return b, nil
}

func (s *Server) postNext(w http.ResponseWriter, r *http.Request) {
	raw, ok := s.readBody(w, r)
	if !ok {
		return
	}
	// The hand-written decoder takes the common bodies; anything it is
	// not sure about goes to encoding/json, errors included.
	body, ok := decodeNextFast(raw)
	if !ok && !decodeJSONBody(w, raw, &body) {
		return
	}
	res, aerr := s.doNext(body)
	if aerr != nil {
		writeAPIError(w, aerr)
		return
	}
	bp, _ := s.bufs.Get().(*[]byte)
	if bp == nil {
		bp = new([]byte)
	}
	defer s.bufs.Put(bp)
	b, ok := appendNextJSON((*bp)[:0], &res)
	*bp = b
	if !ok {
		writeJSON(w, http.StatusOK, res) // encoding/json's error for NaN or ±Inf
		return
	}
	w.Header().Set("Content-Type", "application/json")
	w.WriteHeader(http.StatusOK)
	_, _ = w.Write(b)
}

// maxListLen bounds items and candidates per request; maxBatch bounds the
// requests of one batch.
const (
	maxListLen = 10_000
	maxBatch   = 1_000
)

func checkStrings(field string, vals []string, maxLen int) error {
	if len(vals) > 100 {
		return fmt.Errorf("%s: %d entries, at most 100", field, len(vals))
	}
	for i, v := range vals {
		if v == "" || len(v) > maxLen {
			return fmt.Errorf("%s[%d]: must be 1 to %d bytes", field, i, maxLen)
		}
	}
	return nil
}

func checkItems(field string, items []string) error {
	if len(items) > maxListLen {
		return fmt.Errorf("%s: %d entries, at most %d", field, len(items), maxListLen)
	}
	for i, it := range items {
		if err := validID("item", it, stream.MaxItemBytes); err != nil {
			return fmt.Errorf("%s[%d]: %w", field, i, err)
		}
	}
	return nil
}

// doNext validates and answers one next-items request; HTTP, batch and
// NATS share it.
func (s *Server) doNext(b nextBody) (NextResult, *apiError) {
	k, err := s.checkK(b.K)
	if err != nil {
		return NextResult{}, badParam("%v", err)
	}
	if b.Session != "" {
		if err := validID("session", b.Session, stream.MaxSessionBytes); err != nil {
			return NextResult{}, badParam("%v", err)
		}
		if len(b.Items) > 0 {
			return NextResult{}, badParam("give session or items, not both")
		}
	}
	if err := checkItems("items", b.Items); err != nil {
		return NextResult{}, badParam("%v", err)
	}
	if err := checkItems("exclude", b.Exclude); err != nil {
		return NextResult{}, badParam("%v", err)
	}
	if err := checkStrings("context", b.Context, 256); err != nil {
		return NextResult{}, badParam("%v", err)
	}
	if len(b.Category) > 1024 {
		return NextResult{}, badParam("category: %d bytes, at most 1024", len(b.Category))
	}
	if b.TimeoutMS < 0 || b.TimeoutMS > 60_000 {
		return NextResult{}, badParam("timeout_ms=%d: must be from 0 to 60000", b.TimeoutMS)
	}
	req := NextRequest{Session: b.Session, Items: b.Items, K: k, Keep: b.Keep,
		Category: b.Category, Exclude: b.Exclude, Context: b.Context,
		Budget: time.Duration(b.TimeoutMS) * time.Millisecond}
	if b.Prefer != nil {
		if err := checkItems("prefer.items", b.Prefer.Items); err != nil {
			return NextResult{}, badParam("%v", err)
		}
		if err := checkStrings("prefer.categories", b.Prefer.Categories, 1024); err != nil {
			return NextResult{}, badParam("%v", err)
		}
		req.PreferItems, req.PreferCategories = b.Prefer.Items, b.Prefer.Categories
	}
	res := s.eng.Next(req)
	s.answers.note(b.Session, &res)
	return res, nil
}

// doScore validates and answers one score request.
func (s *Server) doScore(b scoreBody) (ScoreResult, *apiError) {
	if err := checkItems("items", b.Items); err != nil {
		return ScoreResult{}, badParam("%v", err)
	}
	if err := checkItems("candidates", b.Candidates); err != nil {
		return ScoreResult{}, badParam("%v", err)
	}
	return s.eng.Score(ScoreRequest{Items: b.Items, Candidates: b.Candidates}), nil
}

func (s *Server) postScore(w http.ResponseWriter, r *http.Request) {
	var body scoreBody
	if !s.decodeBody(w, r, &body) {
		return
	}
	res, aerr := s.doScore(body)
	if aerr != nil {
		writeAPIError(w, aerr)
		return
	}
	writeJSON(w, http.StatusOK, res)
}

func (s *Server) postNextBatch(w http.ResponseWriter, r *http.Request) {
	serveBatch(s, w, r, s.doNext)
}

func (s *Server) postScoreBatch(w http.ResponseWriter, r *http.Request) {
	serveBatch(s, w, r, s.doScore)
}

// serveBatch answers {"requests":[...]} with one result or error per
// request, in order, using the single-request handler do.
func serveBatch[Req, Res any](s *Server, w http.ResponseWriter, r *http.Request, do func(Req) (Res, *apiError)) {
	var body batchBody[Req]
	if !s.decodeBody(w, r, &body) {
		return
	}
	if len(body.Requests) > maxBatch {
		writeAPIError(w, badParam("requests: %d entries, at most %d", len(body.Requests), maxBatch))
		return
	}
	if aerr := checkBatchBudget(s, body.Requests); aerr != nil {
		writeAPIError(w, aerr)
		return
	}
	rep := batchReply{Results: make([]batchEntry, len(body.Requests))}
	for i, b := range body.Requests {
		res, aerr := do(b)
		if aerr != nil {
			rep.Results[i].Error = aerr
			continue
		}
		rep.Results[i].Result = res
	}
	writeJSON(w, http.StatusOK, rep)
}

func writeAPIError(w http.ResponseWriter, e *apiError) {
	writeError(w, e.status, e.Code, e.Message)
}

func (s *Server) neighbors(w http.ResponseWriter, r *http.Request) {
	id := r.PathValue("id")
	if err := validID("item", id, stream.MaxItemBytes); err != nil {
		writeError(w, http.StatusBadRequest, CodeInvalidParam, err.Error())
		return
	}
	k, err := s.parseK(r.URL.Query().Get("k"))
	if err != nil {
		writeError(w, http.StatusBadRequest, CodeInvalidParam, err.Error())
		return
	}
	ns, known := s.eng.Neighbors(id, k)
	writeJSON(w, http.StatusOK, neighborsReply{Item: id, Known: known, Neighbors: ns})
}

func (s *Server) popular(w http.ResponseWriter, r *http.Request) {
	k, err := s.parseK(r.URL.Query().Get("k"))
	if err != nil {
		writeError(w, http.StatusBadRequest, CodeInvalidParam, err.Error())
		return
	}
	if c := r.URL.Query().Get("category"); c != "" {
		items, err := s.eng.PopularIn(k, c)
		if err != nil {
			writeError(w, http.StatusBadRequest, CodeInvalidParam, strings.TrimPrefix(err.Error(), "session: "))
			return
		}
		writeJSON(w, http.StatusOK, popularReply{Items: items})
		return
	}
	writeJSON(w, http.StatusOK, popularReply{Items: s.eng.Popular(k)})
}

// forgetSession publishes a forget command to the log, so every replica
// deletes the session at the same point; it answers 202 with the command's
// sequence. Without a bus it forgets locally.
func (s *Server) forgetSession(w http.ResponseWriter, r *http.Request) {
	id := r.PathValue("id")
	if err := validID("session", id, stream.MaxSessionBytes); err != nil {
		writeError(w, http.StatusBadRequest, CodeInvalidParam, err.Error())
		return
	}
	if s.pub == nil {
		writeJSON(w, http.StatusOK, forgetReply{Session: id, Tracked: s.eng.ForgetSession(id)})
		return
	}
	ctx, cancel := context.WithTimeout(r.Context(), 10*time.Second)
	defer cancel()
	seq, err := s.pub.PublishControl(ctx, stream.Control{Forget: id})
	if s.published("forget", 1, err) != nil {
		writeError(w, http.StatusServiceUnavailable, CodeUnavailable, "publish to the bus: "+err.Error())
		return
	}
	writeJSON(w, http.StatusAccepted, forgetReply{Session: id, Seq: seq})
}

// snapshot stores a store snapshot in the NATS object store
// (?to=bus, the default) or streams it to the caller (?to=download).
func (s *Server) snapshot(w http.ResponseWriter, r *http.Request) {
	switch to := r.URL.Query().Get("to"); to {
	case "", "bus":
		if s.opts.Snapshot == nil {
			writeError(w, http.StatusServiceUnavailable, CodeUnavailable, "snapshots to the bus are not configured")
			return
		}
		info, err := s.opts.Snapshot(r.Context())
		if err != nil {
			writeError(w, http.StatusInternalServerError, CodeInternal, "snapshot: "+err.Error())
			return
		}
		writeJSON(w, http.StatusOK, map[string]any{"name": info.Name, "seq": info.Seq, "bytes": info.Bytes})
	case "download":
		err := s.eng.Snapshot(func(seq uint64, rd io.Reader) error {
			w.Header().Set("Content-Type", "application/octet-stream")
			w.Header().Set("Waymark-Seq", strconv.FormatUint(seq, 10))
			_, err := io.Copy(w, rd)
			return err
		})
		if err != nil {
			s.opts.Logger.Warn("snapshot download failed", "err", err)
		}
	default:
		writeError(w, http.StatusBadRequest, CodeInvalidParam, fmt.Sprintf("to=%q: must be bus or download", to))
	}
}

// exportPriors streams the learned neighbour lists in the priors format:
// a header line, then one JSON object per item and model.
func (s *Server) exportPriors(w http.ResponseWriter, r *http.Request) {
	w.Header().Set("Content-Type", "application/x-ndjson")
	enc := json.NewEncoder(w)
	st := s.eng.Stats()
	_ = enc.Encode(map[string]any{"format": PriorsFormat, "version": 1, "items": st.Items, "events_applied": st.EventsApplied, "watermark": st.Watermark})
	err := s.eng.ExportPriors(func(row stream.PriorRow) error { return enc.Encode(row) })
	if err != nil {
		s.opts.Logger.Warn("priors export failed", "err", err)
	}
}

func (s *Server) stats(w http.ResponseWriter, r *http.Request) {
	writeJSON(w, http.StatusOK, s.eng.Stats())
}

func (s *Server) readyz(w http.ResponseWriter, r *http.Request) {
	ok, why := s.opts.Ready()
	if fs := s.eng.Faults(); len(fs) > 0 {
		// The state cannot take writes: say why, by reason.
		writeJSON(w, http.StatusServiceUnavailable, map[string]any{
			"status": "not ready", "reason": fs[0].Reason, "faults": fs,
			"error": apiError{Code: CodeUnavailable, Message: faultText(fs)},
		})
		return
	}
	if !ok {
		writeError(w, http.StatusServiceUnavailable, CodeUnavailable, why)
		return
	}
	writeJSON(w, http.StatusOK, map[string]string{"status": "ready"})
}

// splitBatch calls f for each record of an NDJSON body or a JSON array,
// with its 1-based line (NDJSON) or index+1 (array).
func splitBatch(body []byte, f func(n int, rec []byte)) error {
	trimmed := bytes.TrimLeft(body, " \t\r\n")
	if len(trimmed) > 0 && trimmed[0] == '[' {
		var arr []json.RawMessage
		if err := json.Unmarshal(trimmed, &arr); err != nil {
			return fmt.Errorf("JSON array: %w", err)
		}
		for i, rec := range arr {
			f(i+1, rec)
		}
		return nil
	}
	line := 0
	for len(body) > 0 {
		line++
		var rec []byte
		if i := bytes.IndexByte(body, '\n'); i >= 0 {
			rec, body = body[:i], body[i+1:]
		} else {
			rec, body = body, nil
		}
		if len(bytes.TrimSpace(rec)) == 0 {
			continue
		}
		f(line, rec)
	}
	return nil
}

func (s *Server) postEvents(w http.ResponseWriter, r *http.Request) {
	var evs []stream.Event
	s.ingest(w, r, func(rec []byte) error {
		if err := checkKeys(rec, eventKeys); err != nil {
			return err
		}
		ev, err := stream.DecodeJSON(rec)
		if err == nil {
			err = s.eventFitsBus(&ev)
		}
		if err == nil {
			evs = append(evs, ev)
		}
		return err
	}, func(ctx context.Context) error { return s.published("events", len(evs), s.pub.PublishEvents(ctx, evs)) })
}

func (s *Server) postItems(w http.ResponseWriter, r *http.Request) {
	var recs []stream.ItemRecord
	s.ingest(w, r, func(rec []byte) error {
		if err := checkKeys(rec, itemKeys); err != nil {
			return err
		}
		it, err := stream.DecodeItemJSON(rec)
		if err == nil {
			err = s.itemFitsBus(&it)
		}
		if err == nil {
			recs = append(recs, it)
		}
		return err
	}, func(ctx context.Context) error { return s.published("items", len(recs), s.pub.PublishItems(ctx, recs)) })
}

// ingest decodes and checks a whole batch record by record (the message
// size against the bus's max_payload included), then publishes the valid
// ones and reports the rest by line.
func (s *Server) ingest(w http.ResponseWriter, r *http.Request, decode func([]byte) error, publish func(context.Context) error) {
	if s.pub == nil {
		writeError(w, http.StatusServiceUnavailable, CodeUnavailable, "this server does not take writes")
		return
	}
	body, ok := s.readBody(w, r)
	if !ok {
		return
	}
	rep := ingestReply{Errors: []lineReport{}}
	err := splitBatch(body, func(n int, rec []byte) {
		if err := decode(rec); err != nil {
			rep.Rejected++
			if len(rep.Errors) < 100 {
				rep.Errors = append(rep.Errors, lineReport{Line: n, Message: err.Error()})
			}
			return
		}
		rep.Accepted++
	})
	if err != nil {
		writeError(w, http.StatusBadRequest, CodeInvalidJSON, err.Error())
		return
	}
	s.rejected.Add(float64(rep.Rejected))
	if rep.Accepted > 0 {
		ctx, cancel := context.WithTimeout(r.Context(), 30*time.Second)
		defer cancel()
		if err := publish(ctx); err != nil {
			// The bus failed part way (it has no transaction across
			// messages): the records before the failure may be on the
			// log. Resending is safe for events with an id (the bus
			// drops a repeat within its duplicate window) and for
			// catalogue records (a later record replaces the earlier).
			writeError(w, http.StatusServiceUnavailable, CodeUnavailable,
				"publish to the bus: "+err.Error()+"; records before the failure may have been published: resend the batch (events with an id are de-duplicated)")
			return
		}
	}
	code := http.StatusOK
	if rep.Accepted == 0 && rep.Rejected > 0 {
		code = http.StatusBadRequest
		rep.Error = &apiError{Code: CodeInvalidEvents, Message: fmt.Sprintf("all %d records rejected", rep.Rejected)}
	}
	writeJSON(w, code, rep)
}
