package session

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"math"
	"net/http"
	"net/http/httptest"
	"net/url"
	"strconv"
	"strings"
	"sync"
	"testing"

	"waymark/store"
	"waymark/stream"
)

// The fuzz targets below drive the real HTTP API: a Server over a real
// Engine whose state lives in Badger on a temporary folder and was learned
// from real messages. Writes go to a Publisher that records what it is
// handed (the bus is not what is under test here; the stream package
// fuzzes the decoders on the bus side). Their seed corpora live in
// testdata/fuzz/<target>/ and run with every plain `go test`; for example
//
//	go test -run '^$' -fuzz '^FuzzPostNext$' -fuzztime 60s ./session
//
// explores further. Every target checks the same contract: no 500 (the
// route wrapper turns a panic into one), every answer is JSON of the
// endpoint's shape, and every non-2xx answer is the error envelope
// {"error":{"code","message"}} with the status its code documents.

// fuzzMaxBody is the body limit of the fuzzed server, small so that the
// fuzzer reaches the 413 path with inputs of ordinary size.
const fuzzMaxBody = 16 << 10

// fuzzToken guards the write and admin routes of the fuzzed server.
const fuzzToken = "fuzz-token"

// recordingPublisher counts what the API would put on the bus.
type recordingPublisher struct {
	mu       sync.Mutex
	events   int
	items    int
	controls int
}

func (p *recordingPublisher) PublishEvents(_ context.Context, evs []stream.Event) error {
	for i := range evs {
		if err := evs[i].Validate(); err != nil {
			return fmt.Errorf("the API published an invalid event %+v: %w", evs[i], err)
		}
	}
	p.mu.Lock()
	p.events += len(evs)
	p.mu.Unlock()
	return nil
}

func (p *recordingPublisher) PublishItems(_ context.Context, recs []stream.ItemRecord) error {
	p.mu.Lock()
	p.items += len(recs)
	p.mu.Unlock()
	return nil
}

func (p *recordingPublisher) PublishControl(_ context.Context, c stream.Control) (uint64, error) {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.controls++
	return uint64(p.controls), nil
}

func (p *recordingPublisher) PublishControlAsync(c stream.Control) error {
	_, err := p.PublishControl(context.Background(), c)
	return err
}

func (p *recordingPublisher) counts() (events, items int) {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.events, p.items
}

// fuzzFixture is one engine with learned state and the server over it.
type fuzzFixture struct {
	eng *Engine
	srv *Server
	pub *recordingPublisher
}

// fuzzCatalog gives the fixture items with categories and tags, so that
// category filters and content scores have something to work on.
const fuzzCatalog = `{"item":"A","attrs":{"category":"shop/tents","tags":["ridge","two-person"]}}
{"item":"B","attrs":{"category":"shop/tents/pegs","title":"steel pegs"}}
{"item":"C","attrs":{"category":"shop/stoves"},"available":true}
{"item":"D","attrs":{"category":"shop/stoves","tags":"fuel"},"available":false}
{"item":"E","attrs":{"category":"shop/maps"},"published":1767225600000}`

func newFuzzFixture(f *testing.F) *fuzzFixture {
	f.Helper()
	ctx := context.Background()
	so := store.DefaultOptions()
	so.MemTableSize = 8 << 20
	st, err := store.Open(ctx, f.TempDir(), so)
	if err != nil {
		f.Fatal(err)
	}
	f.Cleanup(func() { _ = st.Close() })
	eng, err := NewEngine(ctx, st, nil, DefaultEngineOptions())
	if err != nil {
		f.Fatal(err)
	}
	var msgs []stream.Msg
	add := func(subject, data string) {
		msgs = append(msgs, stream.Msg{Seq: uint64(len(msgs) + 1), Subject: subject, Data: []byte(data)})
	}
	for _, l := range strings.Split(fuzzCatalog, "\n") {
		add("waymark.catalog", l)
	}
	for _, l := range strings.Split(strings.TrimSpace(workedEvents()), "\n") {
		add("waymark.events", l)
	}
	add("waymark.events", "not json")
	if err := eng.Handle(ctx, msgs); err != nil {
		f.Fatal(err)
	}
	if err := eng.Sync(ctx); err != nil {
		f.Fatal(err)
	}
	if st := eng.Stats(); st.EventsApplied != 171 || st.EventsRejected != 1 {
		f.Fatalf("fixture learned %d events and rejected %d, want 171 and 1", st.EventsApplied, st.EventsRejected)
	}
	pub := &recordingPublisher{}
	srv := NewServer(eng, pub, ServerOptions{MaxBody: fuzzMaxBody, Token: fuzzToken})
	return &fuzzFixture{eng: eng, srv: srv, pub: pub}
}

// statusOfCode is the status each error code documents (wire.go).
var statusOfCode = map[string]int{
	CodeInvalidJSON:      400,
	CodeInvalidParam:     400,
	CodeInvalidEvents:    400,
	CodeUnauthorized:     401,
	CodeNotFound:         404,
	CodeMethodNotAllowed: 405,
	CodeBodyTooLarge:     413,
	CodeUnavailable:      503,
}

// serve runs one request through the server and checks the contract every
// endpoint shares; it returns the response for endpoint checks, or nil
// when the request cannot be formed (a URL no HTTP client could send) or
// was answered by a redirect of the router.
func (fx *fuzzFixture) serve(t *testing.T, method, target string, body []byte, auth bool) *httptest.ResponseRecorder {
	t.Helper()
	req, err := http.NewRequest(method, target, bytes.NewReader(body))
	if err != nil {
		return nil
	}
	if req.URL.Path == "" || req.URL.Path[0] != '/' {
		return nil // not an origin-form request target
	}
	if auth {
		req.Header.Set("Authorization", "Bearer "+fuzzToken)
	}
	rec := httptest.NewRecorder()
	fx.srv.ServeHTTP(rec, req)
	code, b := rec.Code, rec.Body.Bytes()
	switch {
	case code >= 500 && code != 503:
		t.Fatalf("%s %q: status %d: %s", method, target, code, b)
	case code == 301 || code == 307 || code == 308:
		// net/http's router redirects unclean paths (//, /./, /../) to
		// their clean form before any handler runs; the target must be
		// one of ours.
		if loc := rec.Header().Get("Location"); !strings.HasPrefix(loc, "/") {
			t.Fatalf("%s %q: redirect %d to %q", method, target, code, loc)
		}
		return nil
	case code < 200 || code >= 300 && code < 400:
		t.Fatalf("%s %q: unexpected status %d: %s", method, target, code, b)
	}
	ct := rec.Header().Get("Content-Type")
	if code >= 400 || ct == "application/json" {
		if ct != "application/json" {
			t.Fatalf("%s %q: status %d with Content-Type %q", method, target, code, ct)
		}
		if !json.Valid(b) {
			t.Fatalf("%s %q: status %d, body is not JSON: %q", method, target, code, b)
		}
	}
	if code >= 400 {
		var e struct {
			Error *struct {
				Code    *string `json:"code"`
				Message *string `json:"message"`
			} `json:"error"`
		}
		if err := json.Unmarshal(b, &e); err != nil || e.Error == nil || e.Error.Code == nil || e.Error.Message == nil || *e.Error.Message == "" {
			t.Fatalf("%s %q: status %d without the error envelope: %s", method, target, code, b)
		}
		want, known := statusOfCode[*e.Error.Code]
		if !known || want != code {
			t.Fatalf("%s %q: status %d with error code %q (documented status %d)", method, target, code, *e.Error.Code, want)
		}
	}
	return rec
}

// ingestCheck checks an answer of POST /v1/events or /v1/items against what
// reached the publisher.
func ingestCheck(t *testing.T, rec *httptest.ResponseRecorder, published int) {
	t.Helper()
	var rep ingestReply
	if err := json.Unmarshal(rec.Body.Bytes(), &rep); err != nil {
		t.Fatalf("ingest reply %s: %v", rec.Body.Bytes(), err)
	}
	switch rec.Code {
	case 200:
		if rep.Accepted != published {
			t.Fatalf("ingest says %d accepted, %d reached the bus: %s", rep.Accepted, published, rec.Body.Bytes())
		}
		if rep.Accepted == 0 && rep.Rejected > 0 {
			t.Fatalf("200 with nothing accepted and %d rejected", rep.Rejected)
		}
	case 400:
		if published != 0 {
			t.Fatalf("400 but %d records reached the bus: %s", published, rec.Body.Bytes())
		}
	default:
		if published != 0 {
			t.Fatalf("status %d but %d records reached the bus", rec.Code, published)
		}
		return
	}
	if rep.Accepted < 0 || rep.Rejected < 0 || len(rep.Errors) != min(rep.Rejected, 100) {
		t.Fatalf("ingest counts inconsistent: %s", rec.Body.Bytes())
	}
	for _, e := range rep.Errors {
		if e.Line < 1 || e.Message == "" {
			t.Fatalf("line report without line or message: %s", rec.Body.Bytes())
		}
	}
}

func fuzzIngest(f *testing.F, path string, items bool, seeds ...string) {
	fx := newFuzzFixture(f)
	for _, s := range seeds {
		f.Add([]byte(s), true)
	}
	f.Add([]byte(`{"item":"A"}`), false)
	f.Fuzz(func(t *testing.T, body []byte, auth bool) {
		ev0, it0 := fx.pub.counts()
		rec := fx.serve(t, "POST", path, body, auth)
		if rec == nil {
			return
		}
		ev1, it1 := fx.pub.counts()
		published, other := ev1-ev0, it1-it0
		if items {
			published, other = other, published
		}
		if other != 0 {
			t.Fatalf("%s published %d records of the other kind", path, other)
		}
		if !auth {
			if rec.Code != 401 || published != 0 {
				t.Fatalf("%s without the token: status %d, %d published", path, rec.Code, published)
			}
			return
		}
		ingestCheck(t, rec, published)
	})
}

// FuzzPostEvents: POST /v1/events with arbitrary bodies (NDJSON, arrays,
// anything).
func FuzzPostEvents(f *testing.F) {
	fuzzIngest(f, "/v1/events", false,
		`{"session":"v1","item":"A","ts":1767225600000}`,
		"{\"session\":\"v1\",\"item\":\"A\",\"ts\":\"2026-01-01T00:00:00Z\",\"kind\":\"cart\",\"id\":\"e-1\"}\n\n{\"session\":\"v1\",\"item\":\"B\",\"ts\":1767225601000}\r\ngarbage\n",
		`[{"session":"v2","item":"C","ts":1767225600000},{"session":"","item":"C","ts":1}, 7]`,
		`[`, `[]`, "\n\n", `{"session":"v3","item":"D","ts":-1}`,
	)
}

// FuzzPostItems: POST /v1/items with arbitrary bodies.
func FuzzPostItems(f *testing.F) {
	fuzzIngest(f, "/v1/items", true,
		fuzzCatalog,
		`[{"item":"F","attrs":{"category":"shop/maps","tags":["a","b"]},"vector":[0.5,-1,2e-3],"available":true,"published":"2026-01-01T00:00:00Z"}]`,
		`{"item":"G","attrs":{"x":[]},"vector":[1e39]}`,
		`{"item":""}`, `[{"item":1}]`,
	)
}

// checkRecs checks a list of recommendations answered for k.
func checkRecs(t *testing.T, res NextResult, k int, raw []byte) {
	t.Helper()
	if len(res.Items) > k {
		t.Fatalf("%d items for k=%d: %s", len(res.Items), k, raw)
	}
	seen := map[string]bool{}
	for _, it := range res.Items {
		if it.Item == "" || seen[it.Item] {
			t.Fatalf("empty or repeated item %q: %s", it.Item, raw)
		}
		seen[it.Item] = true
		if math.IsNaN(it.Score) || math.IsInf(it.Score, 0) {
			t.Fatalf("score %v: %s", it.Score, raw)
		}
	}
	switch res.Source {
	case SourceBlend, SourcePop, SourceContext:
	default:
		t.Fatalf("source %q: %s", res.Source, raw)
	}
}

// wantK is the k a request body asks for, if it decodes.
func wantK(k *int) int {
	if k == nil {
		return 10
	}
	return *k
}

// FuzzPostNext: POST /v1/next with arbitrary bodies.
func FuzzPostNext(f *testing.F) {
	fx := newFuzzFixture(f)
	for _, s := range []string{
		`{"items":["A"],"k":5}`,
		`{"session":"q1"}`,
		`{"session":"q1","items":["A"]}`,
		`{"items":["never-seen","B"],"k":1000,"keep_session_items":true,"category":"shop/tents","exclude":["C"],"timeout_ms":1}`,
		`{"items":[],"context":["category=shop/stoves","locale=xx"],"k":3}`,
		`{"items":["A","A","B"],"prefer":{"items":["C"],"categories":["shop/maps"]}}`,
		`{"items":[""],"k":0}`, `{"k":-1}`, `{"k":1e3}`, `{"k":"5"}`, `{"items":"A"}`, `null`, `{} {}`,
	} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, body []byte) {
		rec := fx.serve(t, "POST", "/v1/next", body, false)
		if rec == nil || rec.Code != 200 {
			return
		}
		var req nextBody
		if err := json.Unmarshal(body, &req); err != nil {
			t.Fatalf("200 for a body that does not decode: %q: %v", body, err)
		}
		var res NextResult
		if err := json.Unmarshal(rec.Body.Bytes(), &res); err != nil {
			t.Fatalf("answer %s: %v", rec.Body.Bytes(), err)
		}
		checkRecs(t, res, wantK(req.K), rec.Body.Bytes())
	})
}

// checkScore checks a score answer against its request, candidate by
// candidate, in order.
func (fx *fuzzFixture) checkScore(t *testing.T, req scoreBody, res ScoreResult, raw []byte) {
	t.Helper()
	if len(res.Candidates) != len(req.Candidates) {
		t.Fatalf("%d candidates answered for %d asked: %s", len(res.Candidates), len(req.Candidates), raw)
	}
	for i, c := range res.Candidates {
		if c.Item != req.Candidates[i] {
			t.Fatalf("candidate %d is %q, asked %q", i, c.Item, req.Candidates[i])
		}
		_, known := fx.eng.Neighbors(c.Item, 1)
		if c.Unknown == known {
			t.Fatalf("candidate %q: unknown=%v but the engine knows it: %v", c.Item, c.Unknown, known)
		}
		if c.Unknown && c.Score != 0 {
			t.Fatalf("unknown candidate %q scored %v", c.Item, c.Score)
		}
		if math.IsNaN(c.Score) || math.IsInf(c.Score, 0) {
			t.Fatalf("candidate %q score %v", c.Item, c.Score)
		}
	}
}

// FuzzPostScore: POST /v1/score with arbitrary bodies.
func FuzzPostScore(f *testing.F) {
	fx := newFuzzFixture(f)
	for _, s := range []string{
		`{"items":["A"],"candidates":["B","C","D","zz"]}`,
		`{"items":[],"candidates":["A"]}`,
		`{"items":["A","B"],"candidates":[]}`,
		`{"items":["A"],"candidates":["B","B",""]}`,
		`{"candidates":null}`, `[]`, `{"items":{"a":1}}`,
	} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, body []byte) {
		rec := fx.serve(t, "POST", "/v1/score", body, false)
		if rec == nil || rec.Code != 200 {
			return
		}
		var req scoreBody
		if err := json.Unmarshal(body, &req); err != nil {
			t.Fatalf("200 for a body that does not decode: %q: %v", body, err)
		}
		var res ScoreResult
		if err := json.Unmarshal(rec.Body.Bytes(), &res); err != nil {
			t.Fatalf("answer %s: %v", rec.Body.Bytes(), err)
		}
		fx.checkScore(t, req, res, rec.Body.Bytes())
	})
}

// batchAnswer is a batch reply with each result kept raw.
type batchAnswer struct {
	Results []struct {
		Result json.RawMessage `json:"result"`
		Error  *apiError       `json:"error"`
	} `json:"results"`
}

func decodeBatch(t *testing.T, rec *httptest.ResponseRecorder, n int) batchAnswer {
	t.Helper()
	var rep batchAnswer
	if err := json.Unmarshal(rec.Body.Bytes(), &rep); err != nil {
		t.Fatalf("batch answer %s: %v", rec.Body.Bytes(), err)
	}
	if len(rep.Results) != n {
		t.Fatalf("%d results for %d requests", len(rep.Results), n)
	}
	for i, r := range rep.Results {
		if (r.Error == nil) == (len(r.Result) == 0) {
			t.Fatalf("result %d has both or neither of result and error: %s", i, rec.Body.Bytes())
		}
		if r.Error != nil && (r.Error.Code == "" || r.Error.Message == "") {
			t.Fatalf("result %d: error without code or message: %s", i, rec.Body.Bytes())
		}
	}
	return rep
}

// FuzzPostNextBatch: POST /v1/next/batch with arbitrary bodies.
func FuzzPostNextBatch(f *testing.F) {
	fuzzBatch(f, "/v1/next/batch", []string{
		`{"requests":[{"items":["A"],"k":3},{"session":"q1"},{"items":["A"],"k":0},{"session":"q1","items":["B"]}]}`,
		`{"requests":[]}`, `{"requests":null}`, `{"requests":[null]}`, `{"requests":{}}`,
	}, func(t *testing.T, _ *fuzzFixture, q nextBody, res NextResult, raw []byte) {
		checkRecs(t, res, wantK(q.K), raw)
	})
}

// FuzzPostScoreBatch: POST /v1/score/batch with arbitrary bodies.
func FuzzPostScoreBatch(f *testing.F) {
	fuzzBatch(f, "/v1/score/batch", []string{
		`{"requests":[{"items":["A"],"candidates":["B","x"]},{"items":[""],"candidates":["A"]}]}`,
		`{"requests":[]}`, `{"requests":[{}]}`, `{"requests":7}`,
	}, func(t *testing.T, fx *fuzzFixture, q scoreBody, res ScoreResult, raw []byte) {
		fx.checkScore(t, q, res, raw)
	})
}

// fuzzBatch fuzzes a batch route: a 200 must come only for a body that
// decodes, with one result or error per request, and each result must pass
// check against its request.
func fuzzBatch[Q, R any](f *testing.F, path string, seeds []string, check func(t *testing.T, fx *fuzzFixture, q Q, res R, raw []byte)) {
	fx := newFuzzFixture(f)
	for _, s := range seeds {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, body []byte) {
		rec := fx.serve(t, "POST", path, body, false)
		if rec == nil || rec.Code != 200 {
			return
		}
		var req batchBody[Q]
		if err := json.Unmarshal(body, &req); err != nil {
			t.Fatalf("200 for a body that does not decode: %q: %v", body, err)
		}
		rep := decodeBatch(t, rec, len(req.Requests))
		for i, r := range rep.Results {
			if r.Error != nil {
				continue
			}
			var res R
			if err := json.Unmarshal(r.Result, &res); err != nil {
				t.Fatalf("result %d: %v", i, err)
			}
			check(t, fx, req.Requests[i], res, r.Result)
		}
	})
}

// FuzzSessionNext: GET /v1/sessions/{id}/next with arbitrary ids and
// query strings.
func FuzzSessionNext(f *testing.F) {
	fx := newFuzzFixture(f)
	for _, s := range [][2]string{
		{"q1", "k=5"}, {"q1", ""}, {"nobody", "k=3&context=category%3Dshop%2Fstoves"},
		{"q1", "k=0"}, {"q1", "k=1001"}, {"q1", "k=abc&keep_session_items=maybe"},
		{"q1", "keep_session_items=true&exclude=B,C&category=shop/tents&timeout_ms=1"},
		{"q1", "timeout_ms=-5"}, {"q1", "timeout_ms=99999999999999999999"}, {"a/b", "k=2"},
		{"q1", "exclude=,,"}, {"q1", "context=" + strings.Repeat("x", 300)}, {"%zz", "k=%"},
	} {
		f.Add(s[0], s[1])
	}
	f.Fuzz(func(t *testing.T, id, query string) {
		target := "/v1/sessions/" + url.PathEscape(id) + "/next"
		if query != "" {
			target += "?" + query
		}
		rec := fx.serve(t, "GET", target, nil, false)
		if rec == nil || rec.Code != 200 {
			return
		}
		k := 10
		// The server read k strictly from the query the request carried
		// (a '#' ends it), so a 200 means it parses.
		u, err := url.Parse(target)
		if err != nil {
			t.Fatalf("200 for a target that does not parse: %q", target)
		}
		if raw := u.Query().Get("k"); raw != "" {
			if k, err = strconv.Atoi(raw); err != nil {
				t.Fatalf("200 with k=%q", raw)
			}
		}
		var res NextResult
		if err := json.Unmarshal(rec.Body.Bytes(), &res); err != nil {
			t.Fatalf("answer %s: %v", rec.Body.Bytes(), err)
		}
		checkRecs(t, res, k, rec.Body.Bytes())
	})
}

// FuzzRoutes: any method, path and body on the whole router, with and
// without the bearer token: the read routes (neighbours, popular, stats,
// health), forget, the admin routes and paths that match nothing.
func FuzzRoutes(f *testing.F) {
	fx := newFuzzFixture(f)
	for _, s := range []struct {
		method, path, body string
		auth               bool
	}{
		{"GET", "/v1/items/A/neighbors?k=3", "", false},
		{"GET", "/v1/items/never/neighbors", "", false},
		{"GET", "/v1/items/A/neighbors?k=0", "", false},
		{"GET", "/v1/popular?k=2", "", false},
		{"GET", "/v1/popular?k=x", "", false},
		{"GET", "/v1/stats", "", false},
		{"GET", "/healthz", "", false},
		{"GET", "/readyz", "", false},
		{"DELETE", "/v1/sessions/q1", "", true},
		{"DELETE", "/v1/sessions/q1", "", false},
		{"POST", "/v1/admin/snapshot", "", true},
		{"POST", "/v1/admin/snapshot?to=elsewhere", "", true},
		{"GET", "/v1/admin/priors", "", false},
		{"PUT", "/v1/next", `{"items":["A"]}`, false},
		{"GET", "/v2/next", "", false},
		{"GET", "/v1//stats", "", false},
		{"PATCH", "/v1/items/%41/neighbors", "x", true},
	} {
		f.Add(s.method, s.path, []byte(s.body), s.auth)
	}
	f.Fuzz(func(t *testing.T, method, path string, body []byte, auth bool) {
		// Snapshot downloads stream the whole store and are exercised by
		// the snapshot tests; here they would only make the fuzzer slow.
		if strings.Contains(path, "download") {
			return
		}
		rec := fx.serve(t, method, path, body, auth)
		if rec == nil || rec.Code != 200 || rec.Header().Get("Content-Type") != "application/json" {
			return
		}
		if u, err := url.Parse(path); err == nil && method == "GET" && strings.HasSuffix(u.Path, "/neighbors") {
			var nb neighborsReply
			if err := json.Unmarshal(rec.Body.Bytes(), &nb); err != nil {
				t.Fatalf("neighbours answer %s: %v", rec.Body.Bytes(), err)
			}
			for _, n := range nb.Neighbors {
				if n.Item == "" || math.IsNaN(n.Score) {
					t.Fatalf("neighbour %+v", n)
				}
			}
		}
	})
}
