package session

import (
	"context"
	"encoding/json"
	"fmt"
	"net/http"
	"net/http/httptest"
	"regexp"
	"strings"
	"testing"
	"time"

	"waymark/store"
)

// newBareServer is the HTTP API over an empty engine on a Badger store in
// a temporary folder, with no bus (read-only): enough for request checks.
func newBareServer(t *testing.T) *Server {
	t.Helper()
	ctx := context.Background()
	so := store.DefaultOptions()
	so.MemTableSize = 8 << 20
	st, err := store.Open(ctx, t.TempDir(), so)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = st.Close() })
	eng, err := NewEngine(ctx, st, nil, DefaultEngineOptions())
	if err != nil {
		t.Fatal(err)
	}
	return NewServer(eng, nil, ServerOptions{})
}

// goWords are Go's words that must not reach an API client (issue 16
// quotes "cannot unmarshal object into Go struct field nextBody.context
// of type []string").
var goWords = regexp.MustCompile(`Go struct|Go value|unmarshal|\[\]string|map\[|\*session|session\.|nextBody|scoreBody|preferBody|json: `)

// TestUnknownKeysAndTypeErrors checks that a mistyped key gets 400 naming
// it (it used to be dropped: {"itms":["A2"]} answered 200 from popularity)
// and that a value of the wrong type is described in the API's terms, on
// every JSON endpoint.
func TestUnknownKeysAndTypeErrors(t *testing.T) {
	srv := newBareServer(t)
	cases := []struct {
		name, path, body string
		say              []string // in the message
	}{
		{"next mistyped items", "/v1/next", `{"itms":["A2"],"k":5}`, []string{`unknown key "itms"`, "items"}},
		{"next unknown in prefer", "/v1/next", `{"prefer":{"itemz":["a"]}}`, []string{`unknown key "itemz"`, "prefer (items, categories)"}},
		{"next unknown with object", "/v1/next", `{"items":["a"],"options":{"x":1}}`, []string{`unknown key "options"`}},
		{"score with session", "/v1/score", `{"session":"s","candidates":["a"]}`, []string{`unknown key "session"`, "candidates"}},
		{"next batch entry", "/v1/next/batch", `{"requests":[{"items":["a"],"kk":3}]}`, []string{`unknown key "kk"`}},
		{"batch top", "/v1/score/batch", `{"requests":[],"parallel":true}`, []string{`unknown key "parallel"`, "requests"}},
		{"context as object", "/v1/next", `{"items":["a"],"context":{"category":"x"}}`, []string{`"context" must be an array of "key=value" strings`, "not an object"}},
		{"k as string", "/v1/next", `{"items":["a"],"k":"5"}`, []string{`"k" must be an integer, not a string`}},
		{"k fraction", "/v1/next", `{"items":["a"],"k":1.5}`, []string{`"k" must be an integer, not a number`}},
		{"items as string", "/v1/score", `{"items":"a","candidates":["b"]}`, []string{`"items" must be an array of strings, not a string`}},
		{"keep as string", "/v1/next", `{"keep_session_items":"yes"}`, []string{`"keep_session_items" must be true or false, not a string`}},
		{"prefer as array", "/v1/next", `{"prefer":[]}`, []string{`"prefer" must be an object, not an array`}},
		{"body an array", "/v1/next", `[]`, []string{"the body must be an object, not an array"}},
		{"requests as object", "/v1/next/batch", `{"requests":{}}`, []string{`"requests" must be an array of objects, not an object`}},
		{"batch entry type", "/v1/next/batch", `{"requests":[{"items":[1]}]}`, []string{`"requests.items" must be an array of strings; an entry is a number`}},
		{"entry type", "/v1/score", `{"items":["a"],"candidates":["b",{}]}`, []string{`"candidates" must be an array of strings; an entry is an object`}},
		{"context entry", "/v1/next", `{"context":[1]}`, []string{`"context" must be an array of "key=value" strings, e.g. ["category=camping"]; an entry is a number`}},
		{"empty body", "/v1/score", ``, []string{"the body is empty"}},
		{"broken JSON", "/v1/next", `{"items":["a"]`, []string{"the body ends inside its JSON value"}},
		{"syntax", "/v1/next", `{"items":[a]}`, []string{"not valid JSON at byte"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			rec := httptest.NewRecorder()
			srv.ServeHTTP(rec, httptest.NewRequest("POST", c.path, strings.NewReader(c.body)))
			var e errorReply
			if err := json.Unmarshal(rec.Body.Bytes(), &e); err != nil {
				t.Fatalf("status %d, body %s: %v", rec.Code, rec.Body, err)
			}
			if rec.Code != http.StatusBadRequest || e.Error.Code != CodeInvalidJSON {
				t.Errorf("status %d code %q, want 400 %s", rec.Code, e.Error.Code, CodeInvalidJSON)
			}
			for _, s := range c.say {
				if !strings.Contains(e.Error.Message, s) {
					t.Errorf("message %q does not say %q", e.Error.Message, s)
				}
			}
			if m := goWords.FindString(e.Error.Message); m != "" {
				t.Errorf("message %q shows Go's %q", e.Error.Message, m)
			}
		})
	}
	// Known keys still work, in any case as encoding/json matches them.
	for _, body := range []string{`{"items":["a"],"k":3}`, `{"Items":["a"],"K":3}`, `{"prefer":{"items":[],"categories":["x"]}}`} {
		rec := httptest.NewRecorder()
		srv.ServeHTTP(rec, httptest.NewRequest("POST", "/v1/next", strings.NewReader(body)))
		if rec.Code != http.StatusOK {
			t.Errorf("%s: status %d: %s", body, rec.Code, rec.Body)
		}
	}
}

// TestWrongMethod checks 405 with an Allow header (RFC 9110, section
// 15.5.6) for a path that exists under other methods, and 404 for a path
// that does not; both with the JSON error body.
func TestWrongMethod(t *testing.T) {
	srv := newBareServer(t)
	cases := []struct {
		method, path string
		code         int
		allow        string
	}{
		{"GET", "/v1/next", 405, "POST"},
		{"PUT", "/v1/events", 405, "POST"},
		{"DELETE", "/v1/stats", 405, "GET, HEAD"},
		{"POST", "/v1/sessions/v-1/next", 405, "GET, HEAD"},
		{"GET", "/v1/sessions/v-1", 405, "DELETE"},
		{"POST", "/", 405, "GET, HEAD"},
		{"GET", "/v1/admin/snapshot", 405, "POST"},
		{"GET", "/v2/next", 404, ""},
		{"POST", "/v1/nothing", 404, ""},
	}
	for _, c := range cases {
		t.Run(c.method+" "+c.path, func(t *testing.T) {
			rec := httptest.NewRecorder()
			srv.ServeHTTP(rec, httptest.NewRequest(c.method, c.path, nil))
			if rec.Code != c.code {
				t.Fatalf("status %d, want %d: %s", rec.Code, c.code, rec.Body)
			}
			if got := rec.Header().Get("Allow"); got != c.allow {
				t.Errorf("Allow %q, want %q", got, c.allow)
			}
			var e errorReply
			if err := json.Unmarshal(rec.Body.Bytes(), &e); err != nil {
				t.Fatalf("body %s: %v", rec.Body, err)
			}
			want := CodeNotFound
			if c.code == 405 {
				want = CodeMethodNotAllowed
			}
			if e.Error.Code != want {
				t.Errorf("code %q, want %q", e.Error.Code, want)
			}
		})
	}
}

// TestIngestKeysAndPopularCategory runs a service on embedded NATS: a
// line of POST /v1/events or /v1/items with a key the format does not
// have is rejected alone, naming the key (attribute keys stay free), and
// /v1/popular honours ?category= or answers 400 with the categories there
// are.
func TestIngestKeysAndPopularCategory(t *testing.T) {
	s := newTestService(t, t.TempDir())
	defer shutdown(t, s)
	base := "http://" + s.HTTPAddr()

	var rep ingestReply
	items := `{"item":"tent","attrs":{"category":"camping/tents","any_key":"free"}}
{"item":"pan","attrs":{"category":"kitchen"},"availble":true}
{"item":"pot","attrs":{"category":"kitchen"},"Available":true}
{"item":"stove","attrs":{"category":"camping/stoves"}}
`
	if code := doJSON(t, "POST", base+"/v1/items", items, &rep); code != 200 || rep.Accepted != 3 || rep.Rejected != 1 {
		t.Fatalf("items: %d %+v", code, rep)
	}
	if len(rep.Errors) != 1 || rep.Errors[0].Line != 2 || !strings.Contains(rep.Errors[0].Message, `unknown key "availble"`) {
		t.Errorf("items errors: %+v", rep.Errors)
	}
	var evs strings.Builder
	ts := int64(1767225600000)
	for i, it := range []string{"tent", "tent", "tent", "stove", "pot", "pot"} {
		fmt.Fprintf(&evs, `{"session":"v%d","item":%q,"ts":%d}`+"\n", i, it, ts+int64(i)*1000)
	}
	evs.WriteString(`{"session":"v9","item":"pan","ts":1767225700000,"knd":"purchase"}` + "\n")
	evs.WriteString(`{"session":"v9","item":"pan","ts":1767225700000,"Kind":"view"}` + "\n")
	rep = ingestReply{}
	if code := doJSON(t, "POST", base+"/v1/events", evs.String(), &rep); code != 200 || rep.Accepted != 7 || rep.Rejected != 1 {
		t.Fatalf("events: %d %+v", code, rep)
	}
	if len(rep.Errors) != 1 || rep.Errors[0].Line != 7 || !strings.Contains(rep.Errors[0].Message, `unknown key "knd"`) {
		t.Errorf("events errors: %+v", rep.Errors)
	}
	waitFor(t, "events applied", 20*time.Second, func() bool { return s.Engine().Stats().EventsApplied == 7 })

	var pop popularReply
	if code := doJSON(t, "GET", base+"/v1/popular?category=camping&k=5", "", &pop); code != 200 {
		t.Fatalf("popular camping: %d", code)
	}
	// tent 3 clicks, stove 1: camping holds camping/tents and camping/stoves.
	if len(pop.Items) != 2 || pop.Items[0].Item != "tent" || pop.Items[1].Item != "stove" {
		t.Errorf("popular in camping: %+v", pop.Items)
	}
	pop = popularReply{}
	doJSON(t, "GET", base+"/v1/popular?category=Kitchen&k=1", "", &pop)
	if len(pop.Items) != 1 || pop.Items[0].Item != "pot" {
		t.Errorf("popular in kitchen, k=1: %+v", pop.Items)
	}
	var e errorReply
	if code := doJSON(t, "GET", base+"/v1/popular?category=garden", "", &e); code != 400 ||
		!strings.Contains(e.Error.Message, `unknown category "garden"`) || !strings.Contains(e.Error.Message, "camping, kitchen") {
		t.Errorf("unknown category: %d %+v", code, e)
	}
}

// TestCheckKeys covers the key scanner of the ingest door on the shapes a
// line takes: nested values and strings holding braces, escaped and
// case-folded keys, and input that is not an object (left to the decoder).
func TestCheckKeys(t *testing.T) {
	cases := []struct {
		rec     string
		unknown string // "" when every key is known or rec is no object
	}{
		{`{"session":"s","item":"i","ts":1}`, ""},
		{` { "session" : "s,}]" , "item":"i\"}","ts":"2026-01-01T00:00:00Z","kind":"view","id":"x"} `, ""},
		{`{"Session":"s","ITEM":"i","ts":1}`, ""},
		{`{"sess\u0069on":"s"}`, ""},
		{`{"session":"s","knd":"purchase"}`, "knd"},
		{`{"session":"s","extra":{"a":[1,{"b":"}"}]},"item":"i"}`, "extra"},
		{`{"session":"s","item":"i","ts":1,"x\"y":null}`, `x"y`},
		{`{}`, ""},
		{`[{"knd":1}]`, ""},
		{`not json`, ""},
		{`{"session":`, ""},
		{`{"session":"s" "item":"i"}`, ""},
	}
	for _, c := range cases {
		got, ok := firstUnknownKey([]byte(c.rec), eventKeys)
		if ok != (c.unknown != "") || got != c.unknown {
			t.Errorf("%s: unknown %q (%v), want %q", c.rec, got, ok, c.unknown)
		}
	}
}
