package session

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"math/rand/v2"
	"net/http/httptest"
	"reflect"
	"strings"
	"testing"

	"waymark/store"
)

// The reference of these tests is encoding/json (Go's standard library),
// through unmarshalBody: what POST /v1/next decoded every body with before
// the hand-written decoder, and what it still falls back to.

// checkNextDecode holds decodeNextFast to encoding/json on one body: when
// the fast path accepts, encoding/json accepts too and decodes the same
// nextBody; when it bails, it leaves a zero nextBody. It reports whether
// the fast path accepted and whether encoding/json did.
func checkNextDecode(t testing.TB, body []byte) (fast, valid bool) {
	t.Helper()
	got, fast := decodeNextFast(body)
	var want nextBody
	err := unmarshalBody(body, &want)
	switch {
	case fast && err != nil:
		t.Fatalf("%q: fast path accepted what encoding/json refuses (%v): %#v", body, err, got)
	case fast && !reflect.DeepEqual(got, want):
		t.Fatalf("%q:\nfast path     %s\nencoding/json %s", body, showNext(got), showNext(want))
	case !fast && !reflect.DeepEqual(got, nextBody{}):
		t.Fatalf("%q: fast path bailed but returned %s", body, showNext(got))
	}
	return fast, err == nil
}

// showNext prints a nextBody with nil and empty slices told apart.
func showNext(b nextBody) string {
	list := func(s []string) string {
		if s == nil {
			return "nil"
		}
		return fmt.Sprintf("%q", s)
	}
	k := "nil"
	if b.K != nil {
		k = fmt.Sprint(*b.K)
	}
	p := "nil"
	if b.Prefer != nil {
		p = "{items " + list(b.Prefer.Items) + " categories " + list(b.Prefer.Categories) + "}"
	}
	return fmt.Sprintf("{session %q items %s k %s keep %v category %q exclude %s context %s prefer %s timeout_ms %d}",
		b.Session, list(b.Items), k, b.Keep, b.Category, list(b.Exclude), list(b.Context), p, b.TimeoutMS)
}

// What the fast path does with a body of the table.
const (
	accept  = iota // takes it, and decodes what encoding/json decodes
	bail           // encoding/json takes it; the fast path leaves it to it
	invalid        // encoding/json refuses it; so does the fast path
)

// nextDecodeCases are hand-written bodies: the shapes the fast path is
// for, and every case it bails on.
var nextDecodeCases = []struct {
	name, body string
	want       int
}{
	// Accepted.
	{"bench shape", `{"items":["i1","i22","i333","i4444"],"k":20}`, accept},
	{"one item", `{"items":["i7"],"k":10}`, accept},
	{"empty object", `{}`, accept},
	{"every field", `{"session":"s-1","items":["a"],"k":5,"keep_session_items":true,"category":"shop/x","exclude":["b","c"],"context":["locale=xx"],"prefer":{"items":["p"],"categories":["shop/y"]},"timeout_ms":250}`, accept},
	{"other order", `{"timeout_ms":0,"prefer":{"categories":["c"],"items":["i"]},"k":1,"items":["z","y"],"session":""}`, accept},
	{"whitespace", " \t\r\n{ \"items\" :\n[ \"a\" ,\t\"b\" ] , \"k\" : 3 ,\"prefer\":{ \"items\" : [ ] } } \r\n\t ", accept},
	{"empty arrays", `{"items":[],"exclude":[],"context":[],"prefer":{"items":[],"categories":[]}}`, accept},
	{"nulls", `{"session":null,"items":null,"k":null,"keep_session_items":null,"category":null,"exclude":null,"context":null,"prefer":null,"timeout_ms":null}`, accept},
	{"prefer empty", `{"prefer":{}}`, accept},
	{"prefer nulls", `{"prefer":{"items":null,"categories":null}}`, accept},
	{"keep false", `{"keep_session_items":false,"items":["a"]}`, accept},
	{"simple escapes", `{"items":["a\"b","c\\d","e\/f","\b\f\n\r\t",""],"session":"\"","category":"\\"}`, accept},
	{"unicode escapes", `{"items":["\u00e9\u0041","\u65e5\u672c","\u0000","\uFFFF","\u2028"]}`, accept},
	{"surrogate pair", `{"items":["\ud83d\ude00","x\uD83D\uDE00y"]}`, accept},
	{"lone surrogates", `{"items":["\ud83d","\ude00x","\ud83d\u0041","\ud83d\ud83d\ude00","\udbff\udfff"]}`, accept},
	{"raw unicode", `{"items":["é日本😀","\u2028 ` + "\u2028\u2029" + `"],"category":"ĉ"}`, accept},
	{"invalid utf-8", "{\"items\":[\"a\xffb\",\"\xc3\",\"\xed\xa0\x80\",\"\xf4\x90\x80\x80\"],\"session\":\"\xfe\"}", accept},
	{"invalid utf-8 with escape", "{\"items\":[\"\\n\xff\"]}", accept},
	{"k minus zero", `{"k":-0}`, accept},
	{"k zero", `{"k":0}`, accept},
	{"k negative", `{"k":-7}`, accept},
	{"k of 18 digits", `{"k":123456789012345678,"timeout_ms":-999999999999999999}`, accept},
	{"many items", `{"items":[` + strings.Repeat(`"abc",`, 99) + `"last"],"exclude":["e"],"k":3}`, accept},
	{"many strings with escapes", `{"items":[` + strings.Repeat(`"a\nb",`, 40) + `"\u00e9"],"context":[` + strings.Repeat(`"c",`, 10) + `"d"]}`, accept},

	// Valid JSON that the fast path leaves to encoding/json.
	{"key in capitals", `{"Items":["a"]}`, bail},
	{"K", `{"K":3}`, bail},
	{"keep in capitals", `{"KEEP_SESSION_ITEMS":true}`, bail},
	{"prefer key in capitals", `{"prefer":{"Items":["a"]}}`, bail},
	{"kelvin sign folds onto k", "{\"\u212a\":3}", bail},
	{"long s folds onto s", "{\"\u017fession\":\"x\"}", bail},
	{"escaped key", `{"\u006b":3}`, bail},
	{"duplicate k", `{"k":1,"k":2}`, bail},
	{"duplicate items", `{"items":["a","b"],"items":["c"]}`, bail},
	{"duplicate items with null", `{"items":["a","b"],"items":[null]}`, bail},
	{"duplicate prefer merges", `{"prefer":{"items":["a"]},"prefer":{"categories":["b"]}}`, bail},
	{"duplicate in prefer", `{"prefer":{"items":["a"],"items":["b"]}}`, bail},
	{"duplicate null", `{"session":"s","session":null}`, bail},
	{"null in items", `{"items":["a",null]}`, bail},
	{"null body", `null`, bail},
	{"trailing vertical tab", "{\"k\":1}\v", bail},
	{"trailing form feed", "{\"k\":1}\f", bail},
	{"trailing no-break space", "{\"k\":1}\u00a0", bail},
	{"k of 19 digits", `{"k":1234567890123456789}`, bail},
	{"timeout of 19 digits", `{"timeout_ms":-1234567890123456789}`, bail},

	// Invalid for encoding/json.
	{"empty", ``, invalid},
	{"spaces", `   `, invalid},
	{"array body", `[]`, invalid},
	{"string body", `"x"`, invalid},
	{"number body", `1`, invalid},
	{"open brace", `{`, invalid},
	{"open items", `{"items":[`, invalid},
	{"open string", `{"items":["a`, invalid},
	{"open key", `{"ite`, invalid},
	{"open escape", `{"items":["a\`, invalid},
	{"k fraction", `{"k":1.0}`, invalid},
	{"k exponent", `{"k":1e2}`, invalid},
	{"k string", `{"k":"5"}`, invalid},
	{"k bool", `{"k":true}`, invalid},
	{"k too big", `{"k":99999999999999999999}`, invalid},
	{"k leading zero", `{"k":01}`, invalid},
	{"k minus", `{"k":-}`, invalid},
	{"k plus", `{"k":+1}`, invalid},
	{"k NaN", `{"k":NaN}`, invalid},
	{"timeout fraction", `{"timeout_ms":1.5}`, invalid},
	{"items string", `{"items":"a"}`, invalid},
	{"items number", `{"items":[1]}`, invalid},
	{"items nested", `{"items":[["a"]]}`, invalid},
	{"items object", `{"items":{}}`, invalid},
	{"session number", `{"session":1}`, invalid},
	{"session array", `{"session":["s"]}`, invalid},
	{"keep string", `{"keep_session_items":"true"}`, invalid},
	{"keep number", `{"keep_session_items":1}`, invalid},
	{"keep short", `{"keep_session_items":tru}`, invalid},
	{"prefer array", `{"prefer":[]}`, invalid},
	{"prefer string", `{"prefer":"x"}`, invalid},
	{"prefer items string", `{"prefer":{"items":"a"}}`, invalid},
	{"prefer open", `{"prefer":{"items":["a"]`, invalid},
	{"two values", `{} {}`, invalid},
	{"trailing junk", `{"k":1}x`, invalid},
	{"trailing brace", `{"k":1}}`, invalid},
	{"trailing bracket", `{"k":1}]`, invalid},
	{"control character", "{\"items\":[\"a\x01\"]}", invalid},
	{"raw newline", "{\"items\":[\"a\nb\"]}", invalid},
	{"control in ignored", "{\"x\":\"\t\"}", invalid},
	{"bad escape", `{"items":["\x"]}`, invalid},
	{"quote escape", `{"items":["\'"]}`, invalid},
	{"short unicode escape", `{"items":["\u12"]}`, invalid},
	{"bad hex", `{"items":["\u12g4"]}`, invalid},
	{"bad escape in ignored", `{"x":"\q"}`, invalid},
	{"bad escape in key", `{"\q":1}`, invalid},
	{"short literal", `{"a":nul}`, invalid},
	{"literal tail", `{"a":truex}`, invalid},
	{"number dot", `{"a":1.}`, invalid},
	{"number leading dot", `{"a":.5}`, invalid},
	{"number leading zero", `{"a":-01}`, invalid},
	{"number bare exponent", `{"a":1e}`, invalid},
	{"number exponent sign", `{"a":1e+}`, invalid},
	{"trailing comma in array", `{"items":["a",]}`, invalid},
	{"trailing comma in object", `{"items":["a"],}`, invalid},
	{"lone comma", `{,}`, invalid},
	{"missing colon", `{"k" 1}`, invalid},
	{"missing comma", `{"items":["a"]"k":1}`, invalid},
	{"missing comma in array", `{"items":["a" "b"]}`, invalid},
	{"single quotes", `{'k':1}`, invalid},
	{"byte order mark", "\ufeff{\"k\":1}", invalid},
	{"unclosed array in ignored", `{"a":[}`, invalid},
	{"nul byte", "{\"k\":1\x00}", invalid},
	// Unknown keys (the fast path bails, unmarshalBody refuses them naming the
	// key; before issue 16 both ignored them).
	{"unknown keys with scalars", `{"extra":"x\u0041\n\"","n":-1.5e+3,"m":0,"o":1E-2,"p":12.50,"t":true,"f":false,"z":null,"items":["a"]}`, invalid},
	{"unknown key with invalid utf-8", "{\"x\":\"\xff\",\"items\":[\"a\"]}", invalid},
	{"unknown keys in prefer", `{"prefer":{"weight":1,"items":["a"],"why":"x"}}`, invalid},
	{"near names", `{"item":"a","sessions":1,"kk":2,"timeout":3,"prefer_items":4,"":5}`, invalid},
	{"prefer field names at the top", `{"categories":"x"}`, invalid},
	{"top field names in prefer", `{"prefer":{"k":1,"session":"s","prefer":null}}`, invalid},
	{"escaped unknown key", `{"a\nb":3}`, invalid},
	{"non-ASCII unknown key", `{"é":3}`, invalid},
	{"unknown key with an object", `{"extra":{"a":1},"items":["a"]}`, invalid},
	{"unknown key with an array", `{"extra":[1,2],"items":["a"]}`, invalid},
	{"unknown key with an object in prefer", `{"prefer":{"x":{}}}`, invalid},
}

// TestNextDecodeMatchesEncodingJSON runs the table, checking both the
// agreement with encoding/json and that the fast path takes exactly the
// bodies it is meant to take.
func TestNextDecodeMatchesEncodingJSON(t *testing.T) {
	for _, tt := range nextDecodeCases {
		t.Run(tt.name, func(t *testing.T) {
			fast, valid := checkNextDecode(t, []byte(tt.body))
			got := invalid
			switch {
			case fast:
				got = accept
			case valid:
				got = bail
			}
			if got != tt.want {
				t.Fatalf("%q: %s, want %s", tt.body, outcomeName[got], outcomeName[tt.want])
			}
		})
	}
}

var outcomeName = map[int]string{accept: "accepted", bail: "left to encoding/json", invalid: "refused by encoding/json"}

// TestNextDecodeRandom compares the two decoders on generated bodies:
// random field order, whitespace, strings with escapes, raw and broken
// UTF-8, ignored fields, wrong types, repeated and case-changed keys, and
// byte-level damage. It also asserts that each outcome occurs often
// enough for the comparison to mean something.
func TestNextDecodeRandom(t *testing.T) {
	rng := rand.New(rand.NewPCG(6, 4))
	var count [3]int
	const n = 20_000
	for range n {
		fast, valid := checkNextDecode(t, randomNextJSON(rng))
		switch {
		case fast:
			count[accept]++
		case valid:
			count[bail]++
		default:
			count[invalid]++
		}
	}
	t.Logf("%d bodies: %d accepted, %d left to encoding/json, %d invalid", n, count[accept], count[bail], count[invalid])
	for o, c := range count {
		if c < n/10 {
			t.Errorf("only %d of %d bodies %s", c, n, outcomeName[o])
		}
	}
}

// TestNextDecodeMarshalled: whatever encoding/json writes for a nextBody
// (compact or indented), the fast path takes, and decodes as
// encoding/json does.
func TestNextDecodeMarshalled(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	for i := range 3000 {
		v := randomNextValue(rng)
		var b []byte
		var err error
		if i%3 == 0 {
			b, err = json.MarshalIndent(v, "", "  ")
		} else {
			b, err = json.Marshal(v)
		}
		if err != nil {
			t.Fatal(err)
		}
		if fast, _ := checkNextDecode(t, b); !fast {
			t.Fatalf("fast path bailed on encoding/json's own %s", b)
		}
	}
}

// FuzzNextBodyDecode holds the fast path to encoding/json on arbitrary
// bytes, seeded with the table and generated bodies:
//
//	go test -run '^$' -fuzz FuzzNextBodyDecode -fuzztime 60s ./session
func FuzzNextBodyDecode(f *testing.F) {
	for _, tt := range nextDecodeCases {
		f.Add([]byte(tt.body))
	}
	rng := rand.New(rand.NewPCG(1, 2))
	for range 50 {
		f.Add(randomNextJSON(rng))
	}
	f.Fuzz(func(t *testing.T, body []byte) {
		checkNextDecode(t, body)
	})
}

// TestPostNextErrorsUnchanged: through the HTTP handler, every body that
// fails gets the status and the bytes of the path before the fast decoder
// (decodeBody's encoding/json and its "more than one JSON value", then
// doNext's checks), on the table and on generated bodies.
func TestPostNextErrorsUnchanged(t *testing.T) {
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
	srv := NewServer(eng, nil, ServerOptions{})
	// oldDecode is decodeBody without the fast path, written out here so
	// that a change to it cannot move the reference along: encoding/json
	// refusing unknown keys, its errors in the API's words (issue 16).
	oldDecode := func(b []byte) (nextBody, string) {
		var v nextBody
		dec := json.NewDecoder(bytes.NewReader(b))
		dec.DisallowUnknownFields()
		if err := dec.Decode(&v); err != nil {
			return v, "body: " + describeJSONError(err, reflect.TypeOf(&v))
		}
		if len(bytes.TrimSpace(b[dec.InputOffset():])) > 0 {
			return v, "body: more than one JSON value"
		}
		return v, ""
	}
	bodies := [][]byte{
		[]byte(`{"items":["a"],"k":0}`), []byte(`{"items":["a"],"k":1001}`), []byte(`{"items":[""]}`),
		[]byte(`{"session":"s","items":["a"]}`), []byte(`{"items":["a"],"timeout_ms":60001}`),
		[]byte(`{"prefer":{"items":[""]}}`), []byte(`{"context":["` + strings.Repeat("c", 257) + `"]}`),
	}
	for _, tt := range nextDecodeCases {
		bodies = append(bodies, []byte(tt.body))
	}
	rng := rand.New(rand.NewPCG(3, 5))
	for range 2000 {
		bodies = append(bodies, randomNextJSON(rng))
	}
	failures := 0
	for _, body := range bodies {
		wantCode, wantBody := 200, []byte(nil)
		v, msg := oldDecode(body)
		if msg != "" {
			wantCode = 400
			wantBody = encodingJSON(t, errorReply{Error: apiError{Code: CodeInvalidJSON, Message: msg}})
		} else if _, aerr := srv.doNext(v); aerr != nil {
			wantCode = aerr.status
			wantBody = encodingJSON(t, errorReply{Error: *aerr})
		}
		rec := httptest.NewRecorder()
		srv.ServeHTTP(rec, httptest.NewRequest("POST", "/v1/next", bytes.NewReader(body)))
		if rec.Code != wantCode {
			t.Fatalf("%q: status %d, want %d: %s", body, rec.Code, wantCode, rec.Body)
		}
		if wantCode != 200 {
			failures++
			if !bytes.Equal(rec.Body.Bytes(), wantBody) {
				t.Fatalf("%q:\ngot  %s\nwant %s", body, rec.Body, wantBody)
			}
		}
	}
	if failures < len(bodies)/4 {
		t.Fatalf("only %d of %d bodies failed: the check saw too few errors", failures, len(bodies))
	}
}

// randomNextValue is a nextBody with random content, strings of random
// bytes included.
func randomNextValue(rng *rand.Rand) nextBody {
	str := func() string {
		b := make([]byte, rng.IntN(10))
		for i := range b {
			if rng.IntN(4) == 0 {
				b[i] = byte(rng.IntN(256))
			} else {
				b[i] = byte('a' + rng.IntN(26))
			}
		}
		return string(b)
	}
	list := func() []string {
		switch rng.IntN(4) {
		case 0:
			return nil
		case 1:
			return []string{}
		}
		s := make([]string, 1+rng.IntN(40))
		for i := range s {
			s[i] = str()
		}
		return s
	}
	v := nextBody{Session: str(), Items: list(), Keep: rng.IntN(2) == 0, Category: str(),
		Exclude: list(), Context: list(), TimeoutMS: rng.IntN(100_000) - 100}
	if rng.IntN(2) == 0 {
		k := rng.IntN(2000) - 10
		v.K = &k
	}
	if rng.IntN(2) == 0 {
		v.Prefer = &preferBody{Items: list(), Categories: list()}
	}
	return v
}

// randomNextJSON writes a random body near the shape of nextBody.
func randomNextJSON(rng *rand.Rand) []byte {
	g := nextGen{rng: rng}
	g.object(false)
	g.ws()
	if rng.IntN(30) == 0 {
		g.b = append(g.b, []string{"x", "}", "{}", "\v", "\u00a0", "0"}[rng.IntN(6)]...)
	}
	if rng.IntN(8) == 0 && len(g.b) > 0 { // byte-level damage
		i := rng.IntN(len(g.b))
		switch rng.IntN(3) {
		case 0:
			g.b = g.b[:i]
		case 1:
			g.b[i] = byte(rng.IntN(256))
		case 2:
			const junk = `"{}[],:\ 0-e.`
			g.b = append(g.b[:i], append([]byte{junk[rng.IntN(len(junk))]}, g.b[i:]...)...)
		}
	}
	return g.b
}

type nextGen struct {
	rng *rand.Rand
	b   []byte
}

func (g *nextGen) one(n int) bool { return g.rng.IntN(n) == 0 }

func (g *nextGen) ws() {
	for g.one(4) {
		g.b = append(g.b, " \t\r\n"[g.rng.IntN(4)])
	}
}

// object writes the top object (prefer false) or prefer's: a random
// subset of the fields in random order, sometimes with a repeated key, a
// key in another case, an ignored key or a value of the wrong type.
func (g *nextGen) object(prefer bool) {
	fields := []string{"session", "items", "k", "keep_session_items", "category", "exclude", "context", "prefer", "timeout_ms"}
	if prefer {
		fields = []string{"items", "categories"}
	}
	g.ws()
	g.b = append(g.b, '{')
	n := g.rng.IntN(len(fields) + 2)
	for i := range n {
		if i > 0 {
			g.ws()
			g.b = append(g.b, ',')
		}
		g.ws()
		var key string
		switch {
		case g.one(30): // rarer since unknown keys are refused, so that valid bodies stay common
			key = []string{"extra", "", "item", "note", "x_y", "weights"}[g.rng.IntN(6)]
		default:
			key = fields[g.rng.IntN(len(fields))] // repeats happen
		}
		if g.one(25) {
			key = strings.ToUpper(key[:min(1, len(key))]) + key[min(1, len(key)):]
		}
		g.b = append(g.b, '"')
		g.b = append(g.b, key...)
		g.b = append(g.b, '"')
		g.ws()
		g.b = append(g.b, ':')
		g.ws()
		g.value(key, prefer)
	}
	g.ws()
	g.b = append(g.b, '}')
}

// value writes the value of key: mostly the right type, sometimes null or
// a value of another type.
func (g *nextGen) value(key string, prefer bool) {
	if g.one(20) {
		g.b = append(g.b, "null"...)
		return
	}
	if g.one(20) {
		g.scalar()
		return
	}
	switch key {
	case "session", "category":
		g.str()
	case "items", "exclude", "context", "categories":
		g.list()
	case "k", "timeout_ms":
		g.integer()
	case "keep_session_items":
		g.b = append(g.b, []string{"true", "false"}[g.rng.IntN(2)]...)
	case "prefer":
		if prefer {
			g.scalar()
		} else {
			g.object(true)
		}
	default:
		if g.one(10) {
			g.b = append(g.b, []string{`{"a":1}`, `[1,"x"]`, `{}`, `[]`}[g.rng.IntN(4)]...)
			return
		}
		g.scalar()
	}
}

func (g *nextGen) list() {
	g.b = append(g.b, '[')
	n := g.rng.IntN(6)
	if g.one(10) {
		n = 30 + g.rng.IntN(40)
	}
	for i := range n {
		if i > 0 {
			g.ws()
			g.b = append(g.b, ',')
		}
		g.ws()
		if g.one(60) {
			g.b = append(g.b, "null"...)
		} else {
			g.str()
		}
	}
	g.ws()
	g.b = append(g.b, ']')
}

func (g *nextGen) integer() {
	switch g.rng.IntN(12) {
	case 0:
		g.b = append(g.b, []string{"-0", "1.0", "1e2", "2E+1", "01", "-", "1234567890123456789", "99999999999999999999", "0.5"}[g.rng.IntN(9)]...)
	case 1:
		g.b = fmt.Appendf(g.b, "%d", g.rng.Int64()>>g.rng.IntN(64))
	default:
		g.b = fmt.Appendf(g.b, "%d", g.rng.IntN(200)-20)
	}
}

// strPieces are the parts random strings are made of: plain text, every
// JSON escape, surrogates whole and broken, raw UTF-8, bytes that are not
// UTF-8, and some that are not JSON.
var strPieces = []string{
	"i", "i123", "shop/tents", "a b", "-", "_",
	`\"`, `\\`, `\/`, `\b`, `\f`, `\n`, `\r`, `\t`, `\u0041`, `\u00e9`, `\u65e5`, `\u0000`, `\uFFFD`, `\u2028`,
	`\ud83d\ude00`, `\ud83d`, `\ude00`, `\udbff\udfff`, `\ud800\u0041`,
	"é", "日本", "😀", "\u2028", "\ufffd",
	"\xff", "\xc3", "\xe6\x97", "\xed\xa0\x80", "\xc0\xaf",
	"\x01", "\x1f", "\x7f", `\x`, `\'`, `\u12`, `\uzzzz`,
}

func (g *nextGen) str() {
	g.b = append(g.b, '"')
	for range g.rng.IntN(5) {
		p := strPieces[g.rng.IntN(len(strPieces))]
		if g.rng.IntN(3) > 0 {
			p = strPieces[g.rng.IntN(6)] // mostly plain
		}
		g.b = append(g.b, p...)
	}
	g.b = append(g.b, '"')
}

func (g *nextGen) scalar() {
	switch g.rng.IntN(4) {
	case 0:
		g.str()
	case 1:
		g.b = append(g.b, []string{"true", "false", "null", "-1.5e+3", "0", "12.50", "1E-2", "-0.0"}[g.rng.IntN(8)]...)
	case 2:
		g.integer()
	default:
		g.b = append(g.b, []string{"[]", `["a"]`, "{}"}[g.rng.IntN(3)]...)
	}
}
