package session

import (
	"context"
	"fmt"
	"html"
	"io"
	"net/http"
	"net/http/httptest"
	"net/url"
	"regexp"
	"strings"
	"testing"
	"time"

	"waymark/store"
)

// pageHandler serves the operator page through srv's own routes once
// NewServer registers it at "/", and through a test-only registration in
// front of srv until then, so these tests keep working either way.
func pageHandler(srv *Server) http.Handler {
	if _, pat := srv.mux.Handler(httptest.NewRequest("GET", "/", nil)); pat != "/" {
		return srv
	}
	mux := http.NewServeMux()
	mux.HandleFunc("GET /{$}", srv.page)
	mux.Handle("/", srv)
	return mux
}

// Ids crafted as markup: they are valid event ids (no control bytes), so
// they reach the models and every list on the page.
const (
	hostileA = `<script>alert(1)</script>`
	hostileB = `"><img src=x onerror=alert(2)>`
)

// pageEvents is workedEvents plus one session over the two hostile ids,
// after the worked clicks so it leaves their counts alone.
func pageEvents() string {
	t := int64(1767225600000) + 200_000
	return workedEvents() +
		fmt.Sprintf(`{"session":"x1","item":%q,"ts":%d}`+"\n", hostileA, t) +
		fmt.Sprintf(`{"session":"x1","item":%q,"ts":%d}`+"\n", hostileB, t+1000)
}

const pageEventCount = 173 // workedEvents' 171 and the two hostile clicks

// pageBlend is the blend of the page tests (the README's default weights).
const pageBlend = "blend(markov=1,sr=1,iknn=1,pop=0.1)"

// newPageService starts a service, feeds it pageEvents over HTTP and
// returns it with a page handler over its engine.
func newPageService(t *testing.T) (*Service, http.Handler) {
	t.Helper()
	svc := newTestService(t, t.TempDir(), func(o *ServiceOptions) {
		// Pin the blend: the hand-computed features and scores below are
		// for exactly these signals and weights, whatever the default.
		o.Engine.Blend = pageBlend
		o.Engine.ExploreShare = 0 // the page shows the blend's own ranking here
		o.Engine.Pipeline.Models = []string{pageBlend}
	})
	t.Cleanup(func() { shutdown(t, svc) })
	base := "http://" + svc.HTTPAddr()
	var ing ingestReply
	if code := doJSON(t, "POST", base+"/v1/events", pageEvents(), &ing); code != 200 || ing.Accepted != pageEventCount {
		t.Fatalf("POST /v1/events: %d %+v", code, ing)
	}
	waitFor(t, "page events applied and the stream position polled", 20*time.Second, func() bool {
		st := svc.Engine().Stats()
		return st.EventsApplied == pageEventCount && st.StreamLast == pageEventCount
	})
	srv := NewServer(svc.Engine(), nil, ServerOptions{Ready: svc.ready})
	return svc, pageHandler(srv)
}

func getPage(t *testing.T, h http.Handler, query string) (int, http.Header, string) {
	t.Helper()
	rec := httptest.NewRecorder()
	h.ServeHTTP(rec, httptest.NewRequest("GET", "/"+query, nil))
	b, _ := io.ReadAll(rec.Result().Body)
	return rec.Code, rec.Result().Header, string(b)
}

var (
	rowRe  = regexp.MustCompile(`(?s)<tr[^>]*>(.*?)</tr>`)
	cellRe = regexp.MustCompile(`(?s)<td[^>]*>(.*?)</td>`)
	tagRe  = regexp.MustCompile(`<[^>]*>`)
)

// tableAfter returns the text of each body row's cells of the first table
// after marker in page, unescaped; nil when marker is absent.
func tableAfter(page, marker string) [][]string {
	i := strings.Index(page, marker)
	if i < 0 {
		return nil
	}
	rest := page[i:]
	if j := strings.Index(rest, "</table>"); j >= 0 {
		rest = rest[:j]
	}
	var rows [][]string
	for _, r := range rowRe.FindAllStringSubmatch(rest, -1) {
		var cells []string
		for _, c := range cellRe.FindAllStringSubmatch(r[1], -1) {
			cells = append(cells, html.UnescapeString(tagRe.ReplaceAllString(c[1], "")))
		}
		if len(cells) > 0 { // header rows have th only
			rows = append(rows, cells)
		}
	}
	return rows
}

// statValue returns the unescaped text of the stat card with id.
func statValue(page, id string) string {
	m := regexp.MustCompile(`id="` + id + `"[^>]*>([^<]*)<`).FindStringSubmatch(page)
	if m == nil {
		return ""
	}
	return html.UnescapeString(m[1])
}

func TestPageHandler(t *testing.T) {
	svc, h := newPageService(t)

	// Hand-computed expectations for workedEvents (50 x A>B>C, 10 x A>D,
	// one lone A), from the definitions in DESIGN.md; decay over the 200 s
	// of event time at the 7-day half-life moves every figure by under
	// 3e-4 relative, below the page's rounding.
	//   popularity: A 61, B 50, C 50, D 10 clicks.
	//   neighbours of A: A is in 61 sessions (the lone A too), B and C in
	//     50, D in 10: cos(A,B) = cos(A,C) = 50/sqrt(61·50) = 0.905,
	//     cos(A,D) = 10/sqrt(61·10) = 0.405.
	//   session [A]: markov A>B 50, A>D 10 → features B 1, D 0.200;
	//     SR (1/gap) B 50, C 25, D 10 → B 1, C 0.500, D 0.200;
	//     iknn B 1, C 1, D 0.405/0.905 = 1/sqrt(5) = 0.447; pop B 50/61 = 0.820;
	//     score B = 1+1+1+0.1·0.820 = 3.082, C = 0.5+1+0.082 = 1.582.
	tests := []struct {
		name   string
		query  string
		code   int
		want   []string // substrings of the page
		absent []string
		check  func(t *testing.T, page string)
	}{
		{
			name: "stats and popular", query: "", code: 200,
			want: []string{`id="ready" class="ok">ready<`, "<code>markov</code>", "<code>pop</code>"},
			check: func(t *testing.T, page string) {
				for id, want := range map[string]string{
					"events-applied": fmt.Sprint(pageEventCount), "events-rejected": "0", "items": "6",
					"consumer-lag": "0", "last-sequence": fmt.Sprint(pageEventCount), "stream-last": fmt.Sprint(pageEventCount),
				} {
					if got := statValue(page, id); got != want {
						t.Errorf("stat %s = %q, want %q", id, got, want)
					}
				}
				blend := statValue(page, "blend")
				for _, part := range []string{"blend(", "markov=1", "sr=1", "iknn=1", "pop=0.1"} {
					if !strings.Contains(blend, part) {
						t.Errorf("blend shown as %q, lacks %q", blend, part)
					}
				}
				if got := statValue(page, "blend-mixture"); got != "" {
					t.Errorf("a blend with fixed weights shows a learned mixture %q", got)
				}
				if got := statValue(page, "store-size"); !strings.HasSuffix(got, "B") {
					t.Errorf("store size %q is not a byte size", got)
				}
				rows := tableAfter(page, `id="popular"`)
				if len(rows) != 6 {
					t.Fatalf("popular rows: %q", rows)
				}
				want := [][2]string{{"A", "61.0"}, {"", "50.0"}, {"", "50.0"}, {"D", "10.0"}}
				for i, w := range want {
					if (w[0] != "" && rows[i][1] != w[0]) || rows[i][2] != w[1] {
						t.Errorf("popular row %d = %q, want %q", i, rows[i], w)
					}
				}
				if rows[1][1]+rows[2][1] != "BC" && rows[1][1]+rows[2][1] != "CB" {
					t.Errorf("popular rows 2 and 3 = %q %q, want B and C", rows[1], rows[2])
				}
				got := rows[4][1] + rows[5][1]
				if got != hostileA+hostileB && got != hostileB+hostileA {
					t.Errorf("hostile ids not shown as text: %q", rows[4:])
				}
			},
		},
		{
			name: "neighbours", query: "?item=A&k=3", code: 200,
			check: func(t *testing.T, page string) {
				rows := tableAfter(page, `id="neighbors"`)
				if len(rows) != 3 || rows[0][1] != "0.905" || rows[1][1] != "0.905" || rows[2][0] != "D" || rows[2][1] != "0.405" {
					t.Fatalf("neighbours of A: %q", rows)
				}
				if rows[0][0]+rows[1][0] != "BC" && rows[0][0]+rows[1][0] != "CB" {
					t.Errorf("neighbours of A: %q, want B and C first", rows)
				}
			},
		},
		{
			name: "unknown item is text", query: "?item=" + url.QueryEscape("<b>x</b>"), code: 200,
			want:   []string{"unknown item", "&lt;b&gt;x&lt;/b&gt;"},
			absent: []string{"<b>x</b>"},
		},
		{
			name: "session answer with features", query: "?session=A&k=3", code: 200,
			want: []string{`class="answer-source">blend<`, `class="answer-known">1<`, `class="answer-unknown">0<`},
			check: func(t *testing.T, page string) {
				head := page[strings.Index(page, `<div id="answer">`):]
				for _, col := range []string{">markov<", ">sr<", ">iknn<", ">pop<"} {
					if !strings.Contains(head, col) {
						t.Errorf("answer lacks feature column %s", col)
					}
				}
				// Columns: #, item, score, then Signals() in order.
				cols := append([]string{"#", "item", "score"}, svc.Engine().blend.Signals()...)
				at := func(row []string, name string) string {
					for i, c := range cols {
						if c == name && i < len(row) {
							return row[i]
						}
					}
					return "missing"
				}
				rows := tableAfter(page, `<div id="answer">`)
				if len(rows) != 3 {
					t.Fatalf("answer rows: %q", rows)
				}
				wantRows := []map[string]string{
					{"item": "B", "score": "3.082", "markov": "1.000", "sr": "1.000", "iknn": "1.000", "pop": "0.820"},
					{"item": "C", "score": "1.582", "markov": "0", "sr": "0.500", "iknn": "1.000", "pop": "0.820"},
					{"item": "D", "markov": "0.200", "sr": "0.200", "iknn": "0.447"},
				}
				for i, w := range wantRows {
					for name, v := range w {
						if got := at(rows[i], name); got != v {
							t.Errorf("answer row %d %s = %q, want %q (row %q)", i+1, name, got, v, rows[i])
						}
					}
				}
			},
		},
		{
			name: "unknown session falls back to popularity", query: "?session=" + url.QueryEscape("never-seen, also-not"), code: 200,
			want: []string{`class="answer-source">pop<`, `class="answer-unknown">2<`, "popularity fallback"},
			check: func(t *testing.T, page string) {
				if rows := tableAfter(page, `<div id="answer">`); len(rows) == 0 || rows[0][1] != "A" {
					t.Errorf("fallback answer: %q, want A first", rows)
				}
			},
		},
		{
			name: "empty session falls back to popularity", query: "?session=+,+", code: 200,
			want: []string{`class="answer-source">pop<`, `class="answer-known">0<`},
		},
		{
			name: "keep session items", query: "?session=A&keep=on&k=1000", code: 200,
			want: []string{` checked>`},
			check: func(t *testing.T, page string) {
				found := false
				for _, r := range tableAfter(page, `<div id="answer">`) {
					found = found || r[1] == "A"
				}
				if !found {
					t.Error("keep=on: the session's own item A is missing from a full list")
				}
			},
		},
		{
			name: "hostile session id", query: "?session=" + url.QueryEscape(hostileA), code: 200,
			want:   []string{html.EscapeString(hostileB), "/?item=%22%3e%3cimg%20src%3dx%20onerror%3dalert%282%29%3e"},
			absent: []string{hostileA, hostileB},
			check: func(t *testing.T, page string) {
				if rows := tableAfter(page, `<div id="answer">`); len(rows) == 0 || rows[0][1] != hostileB {
					t.Errorf("answer for the hostile session: %q, want the other hostile id first", rows)
				}
			},
		},
		{name: "k zero", query: "?k=0", code: 400, want: []string{`id="error"`, "invalid_parameter", "k=&#34;0&#34;", `id="events-applied"`}},
		{name: "k not a number", query: "?item=A&k=ten", code: 400, want: []string{"invalid_parameter"}, absent: []string{`id="neighbors"`}},
		{name: "item too long", query: "?item=" + strings.Repeat("x", 257), code: 400, want: []string{"item id must be 1 to 256 bytes"}},
		{name: "empty item", query: "?item=", code: 400, want: []string{"item id must be 1 to 256 bytes"}},
		{name: "session entry too long", query: "?session=A," + strings.Repeat("y", 257), code: 400, want: []string{"session entry 2"}, absent: []string{`id="answer"`}},
		{name: "bad keep", query: "?session=A&keep=maybe", code: 400, want: []string{"keep=&#34;maybe&#34;"}, absent: []string{`id="answer"`}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			code, hdr, page := getPage(t, h, tt.query)
			if code != tt.code {
				t.Fatalf("status %d, want %d\n%s", code, tt.code, page)
			}
			if ct := hdr.Get("Content-Type"); ct != "text/html; charset=utf-8" {
				t.Errorf("Content-Type %q", ct)
			}
			if csp := hdr.Get("Content-Security-Policy"); !strings.Contains(csp, "default-src 'none'") || strings.Contains(csp, "script-src") {
				t.Errorf("Content-Security-Policy %q must forbid scripts", csp)
			}
			// No script, no embedded or external resource, no absolute link.
			for _, bad := range []string{"<script", "<img", "<link", "<iframe", `href="http`, `src="`, "javascript:"} {
				if strings.Contains(page, bad) {
					t.Errorf("page contains %q", bad)
				}
			}
			for _, w := range tt.want {
				if !strings.Contains(page, w) {
					t.Errorf("page lacks %q", w)
				}
			}
			for _, a := range tt.absent {
				if strings.Contains(page, a) {
					t.Errorf("page contains %q", a)
				}
			}
			if tt.check != nil {
				tt.check(t, page)
			}
		})
	}
}

// TestPageMatchesEngine checks the page shows the engine's own answer and
// neighbours, row for row, for every item of the worked example.
func TestPageMatchesEngine(t *testing.T) {
	svc, h := newPageService(t)
	e := svc.Engine()
	for _, seq := range [][]string{{"A"}, {"B"}, {"A", "B"}, {"D"}, {"A", "D", "C"}} {
		t.Run(strings.Join(seq, ","), func(t *testing.T) {
			_, _, page := getPage(t, h, "?k=5&session="+url.QueryEscape(strings.Join(seq, ",")))
			rows := tableAfter(page, `<div id="answer">`)
			res := e.Next(NextRequest{Items: seq, K: 5})
			if len(rows) != len(res.Items) {
				t.Fatalf("page rows %q, engine %+v", rows, res.Items)
			}
			for i, it := range res.Items {
				if rows[i][1] != it.Item || rows[i][2] != fmt.Sprintf("%.3f", it.Score) {
					t.Errorf("row %d = %q, engine %+v", i+1, rows[i], it)
				}
			}
			_, _, page = getPage(t, h, "?k=5&item="+url.QueryEscape(seq[len(seq)-1]))
			nrows := tableAfter(page, `id="neighbors"`)
			ns, _ := e.Neighbors(seq[len(seq)-1], 5)
			if len(nrows) != len(ns) {
				t.Fatalf("neighbour rows %q, engine %+v", nrows, ns)
			}
			for i, n := range ns {
				if nrows[i][0] != n.Item || nrows[i][1] != fmt.Sprintf("%.3f", n.Score) {
					t.Errorf("neighbour %d = %q, engine %+v", i+1, nrows[i], n)
				}
			}
		})
	}
}

// TestPageEmptyEngine renders a fresh engine over an empty store: no clicks,
// no answer, nothing to divide by.
func TestPageEmptyEngine(t *testing.T) {
	ctx := context.Background()
	st, err := store.Open(ctx, t.TempDir(), store.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = st.Close() })
	e, err := NewEngine(ctx, st, nil, DefaultEngineOptions())
	if err != nil {
		t.Fatal(err)
	}
	notReady := func() (bool, string) { return false, "consumer lag 5 above 1" }
	h := pageHandler(NewServer(e, nil, ServerOptions{Ready: notReady}))
	tests := []struct {
		name, query string
		want        []string
	}{
		{"overview", "", []string{"no clicks yet", `id="events-applied">0<`, "none yet", "not ready: consumer lag 5 above 1"}},
		{"session", "?session=A", []string{`class="answer-source">pop<`, "no answer: the models hold no items yet"}},
		{"item", "?item=A", []string{"unknown item"}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			code, _, page := getPage(t, h, tt.query)
			if code != 200 {
				t.Fatalf("status %d\n%s", code, page)
			}
			for _, w := range tt.want {
				if !strings.Contains(page, w) {
					t.Errorf("page lacks %q", w)
				}
			}
		})
	}
}

func TestPageByteSize(t *testing.T) {
	tests := []struct {
		n    int64
		want string
	}{
		{0, "0 B"}, {1023, "1023 B"}, {1024, "1.0 KiB"}, {1536, "1.5 KiB"},
		{10 << 20, "10.0 MiB"}, {3 << 30, "3.0 GiB"}, {1 << 40, "1.0 TiB"},
	}
	for _, tt := range tests {
		if got := byteSize(tt.n); got != tt.want {
			t.Errorf("byteSize(%d) = %q, want %q", tt.n, got, tt.want)
		}
	}
}
