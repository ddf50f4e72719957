package stream

import (
	"encoding/json"
	"errors"
	"strings"
	"testing"
)

// Expected unix-millisecond values for RFC 3339 inputs were computed with
// Python 3.11.7 datetime.fromisoformat (an implementation independent of Go's
// time package): (t - epoch) // timedelta(milliseconds=1).
func TestDecodeJSON(t *testing.T) {
	long := func(n int) string { return strings.Repeat("x", n) }
	tests := []struct {
		name  string
		in    string
		want  Event
		field string // for errors: the field named in the *FieldError ("" = whole record)
		bad   bool
	}{
		{name: "minimal ms", in: `{"session":"s1","item":"a","ts":1767225600000}`,
			want: Event{Session: "s1", Item: "a", TS: 1767225600000}},
		{name: "all fields", in: `{"session":"s1","item":"a","ts":1767225600000,"kind":"purchase","id":"e1"}`,
			want: Event{Session: "s1", Item: "a", TS: 1767225600000, Kind: KindPurchase, ID: "e1"}},
		{name: "field order free, spaces", in: " { \"ts\" : 1767225600000 , \"item\":\"a\",\n\"session\":\"s1\" } \r\n",
			want: Event{Session: "s1", Item: "a", TS: 1767225600000}},
		{name: "rfc3339 utc", in: `{"session":"s1","item":"a","ts":"2026-01-01T00:00:00Z"}`,
			want: Event{Session: "s1", Item: "a", TS: 1767225600000}},
		{name: "rfc3339 offset and fraction", in: `{"session":"s1","item":"a","ts":"2026-01-01T01:00:00.250+01:00"}`,
			want: Event{Session: "s1", Item: "a", TS: 1767225600250}},
		{name: "rfc3339 microseconds truncate to ms", in: `{"session":"s1","item":"a","ts":"2008-04-01T12:30:45.123456Z"}`,
			want: Event{Session: "s1", Item: "a", TS: 1207053045123}},
		{name: "latest accepted time", in: `{"session":"s1","item":"a","ts":"9999-12-31T23:59:59.999Z"}`,
			want: Event{Session: "s1", Item: "a", TS: MaxTS}},
		{name: "ts as whole float", in: `{"session":"s1","item":"a","ts":1767225600000.0}`,
			want: Event{Session: "s1", Item: "a", TS: 1767225600000}},
		{name: "ts with exponent", in: `{"session":"s1","item":"a","ts":1.7672256E12}`,
			want: Event{Session: "s1", Item: "a", TS: 1767225600000}},
		{name: "ts digits in a string", in: `{"session":"s1","item":"a","ts":"1767225600000"}`,
			want: Event{Session: "s1", Item: "a", TS: 1767225600000}},
		{name: "ts 1 ms", in: `{"session":"s1","item":"a","ts":1}`, want: Event{Session: "s1", Item: "a", TS: 1}},
		{name: "kinds", in: `{"session":"s1","item":"a","ts":5,"kind":"view"}`, want: Event{Session: "s1", Item: "a", TS: 5, Kind: KindView}},
		{name: "kind cart", in: `{"session":"s1","item":"a","ts":5,"kind":"cart"}`, want: Event{Session: "s1", Item: "a", TS: 5, Kind: KindCart}},
		{name: "kind any case", in: `{"session":"s1","item":"a","ts":5,"kind":"Purchase"}`, want: Event{Session: "s1", Item: "a", TS: 5, Kind: KindPurchase}},
		{name: "empty kind is click", in: `{"session":"s1","item":"a","ts":5,"kind":""}`, want: Event{Session: "s1", Item: "a", TS: 5}},
		{name: "unknown fields ignored", in: `{"session":"s1","x":{"deep":[1,2,{"y":null}]},"item":"a","ts":5,"price":9.5,"ok":true,"n":null,"s":"q\"x"}`,
			want: Event{Session: "s1", Item: "a", TS: 5}},
		{name: "escaped strings", in: `{"session":"s\u00e9\"1","item":"a\/b","ts":5}`,
			want: Event{Session: "sé\"1", Item: "a/b", TS: 5}},
		{name: "utf8 ids", in: `{"session":"séance","item":"商品-7","ts":5}`,
			want: Event{Session: "séance", Item: "商品-7", TS: 5}},
		{name: "key case folded like encoding/json", in: `{"Session":"s1","ITEM":"a","Ts":5}`,
			want: Event{Session: "s1", Item: "a", TS: 5}},
		{name: "duplicate key: last wins", in: `{"session":"s0","session":"s1","item":"a","ts":5}`,
			want: Event{Session: "s1", Item: "a", TS: 5}},
		{name: "max lengths", in: `{"session":"` + long(MaxSessionBytes) + `","item":"` + long(MaxItemBytes) + `","ts":5,"id":"` + long(MaxIDBytes) + `"}`,
			want: Event{Session: long(MaxSessionBytes), Item: long(MaxItemBytes), TS: 5, ID: long(MaxIDBytes)}},

		{name: "not json", in: `not json at all`, bad: true, field: ""},
		{name: "empty input", in: ``, bad: true, field: ""},
		{name: "empty object", in: `{}`, bad: true, field: "session"},
		{name: "array", in: `[1,2]`, bad: true, field: ""},
		{name: "truncated", in: `{"session":"s1","item":"a","ts":5`, bad: true, field: ""},
		{name: "trailing garbage", in: `{"session":"s1","item":"a","ts":5} x`, bad: true, field: ""},
		{name: "two objects", in: `{"session":"s1","item":"a","ts":5}{}`, bad: true, field: ""},
		{name: "missing item", in: `{"session":"s1","ts":5}`, bad: true, field: "item"},
		{name: "missing session", in: `{"item":"a","ts":5}`, bad: true, field: "session"},
		{name: "missing ts", in: `{"session":"s1","item":"a"}`, bad: true, field: "ts"},
		{name: "null session", in: `{"session":null,"item":"a","ts":5}`, bad: true, field: "session"},
		{name: "empty session", in: `{"session":"","item":"a","ts":1767225600000}`, bad: true, field: "session"},
		{name: "empty item", in: `{"session":"s1","item":"","ts":1767225600000}`, bad: true, field: "item"},
		{name: "session too long", in: `{"session":"` + long(MaxSessionBytes+1) + `","item":"a","ts":5}`, bad: true, field: "session"},
		{name: "item too long", in: `{"session":"s1","item":"` + long(5000) + `","ts":1767225600000}`, bad: true, field: "item"},
		{name: "id too long", in: `{"session":"s1","item":"a","ts":5,"id":"` + long(MaxIDBytes+1) + `"}`, bad: true, field: "id"},
		{name: "session number", in: `{"session":17,"item":"a","ts":5}`, bad: true, field: "session"},
		{name: "control char in item", in: `{"session":"s1","item":"a\nb","ts":5}`, bad: true, field: "item"},
		{name: "ts zero", in: `{"session":"s1","item":"a","ts":0}`, bad: true, field: "ts"},
		{name: "ts negative", in: `{"session":"s1","item":"a","ts":-5}`, bad: true, field: "ts"},
		{name: "ts fraction", in: `{"session":"s1","item":"a","ts":1767225600000.5}`, bad: true, field: "ts"},
		{name: "ts huge", in: `{"session":"s1","item":"a","ts":1e300}`, bad: true, field: "ts"},
		{name: "ts overflow int64", in: `{"session":"s1","item":"a","ts":99999999999999999999}`, bad: true, field: "ts"},
		{name: "ts after year 9999", in: `{"session":"s1","item":"a","ts":253402300800000}`, bad: true, field: "ts"},
		{name: "ts bad string", in: `{"session":"s1","item":"a","ts":"yesterday"}`, bad: true, field: "ts"},
		{name: "ts date only", in: `{"session":"s1","item":"a","ts":"2026-01-01"}`, bad: true, field: "ts"},
		{name: "ts bool", in: `{"session":"s1","item":"a","ts":true}`, bad: true, field: "ts"},
		{name: "ts object", in: `{"session":"s1","item":"a","ts":{}}`, bad: true, field: "ts"},
		{name: "ts leading zero", in: `{"session":"s1","item":"a","ts":0123}`, bad: true, field: ""},
		{name: "unknown kind", in: `{"session":"s1","item":"a","ts":5,"kind":"like"}`, bad: true, field: "kind"},
		{name: "kind number", in: `{"session":"s1","item":"a","ts":5,"kind":1}`, bad: true, field: "kind"},
		{name: "bad escape", in: `{"session":"s\x1","item":"a","ts":5}`, bad: true, field: ""},
		{name: "raw control char", in: "{\"session\":\"s\x01\",\"item\":\"a\",\"ts\":5}", bad: true, field: ""},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, err := DecodeJSON([]byte(tt.in))
			if tt.bad {
				if err == nil {
					t.Fatalf("DecodeJSON(%q) = %+v, want an error", tt.in, got)
				}
				if !errors.Is(err, ErrInvalidEvent) {
					t.Fatalf("error %v does not wrap ErrInvalidEvent", err)
				}
				var fe *FieldError
				if !errors.As(err, &fe) {
					t.Fatalf("error %v is not a *FieldError", err)
				}
				if fe.Field != tt.field {
					t.Fatalf("error %q names field %q, want %q", err, fe.Field, tt.field)
				}
				if fe.Reason == "" {
					t.Fatalf("error %q has no reason", err)
				}
				return
			}
			if err != nil {
				t.Fatalf("DecodeJSON(%q): %v", tt.in, err)
			}
			if got != tt.want {
				t.Fatalf("DecodeJSON(%q)\n got %+v\nwant %+v", tt.in, got, tt.want)
			}
		})
	}
}

// TestDecodePaths pins which path a line takes, so the fast path really
// serves the common shape (a regression here is a silent slowdown).
func TestDecodePaths(t *testing.T) {
	tests := []struct {
		in   string
		fast bool
	}{
		{`{"session":"s1","item":"a","ts":1767225600000}`, true},
		{`{"session":"s1","item":"a","ts":"2026-01-01T00:00:00Z","kind":"view","id":"x"}`, true},
		{`{"session":"s1","item":"a","ts":5,"price":1.5e3,"ok":false,"note":"a\"b","gone":null}`, true},
		{`{"session":"séance","item":"a","ts":5}`, true},
		{`{}`, true},
		{`{"session":"s\"1","item":"a","ts":5}`, false}, // escape in a field
		{`{"Session":"s1","item":"a","ts":5}`, false},   // case-folded key
		{`{"session":"s1","item":"a","ts":5,"x":[1]}`, false},
		{`{"session":null,"item":"a","ts":5}`, false},
		{`{"session":"a","session":"b","item":"a","ts":5}`, false},
		{"{\"session\":\"\xff\",\"item\":\"a\",\"ts\":5}", false}, // invalid UTF-8: encoding/json replaces it
		{`{"session":"s1","item":"a","ts":5,}`, false},
		{`{"session":"s1","item":"a","ts":-}`, false},
	}
	for _, tt := range tests {
		_, ok := decodeFast([]byte(tt.in))
		if ok != tt.fast {
			t.Errorf("decodeFast(%q) ok=%v, want %v", tt.in, ok, tt.fast)
		}
	}
}

func TestAppendJSONRoundTrip(t *testing.T) {
	tests := []Event{
		{Session: "s1", Item: "a", TS: 1767225600000},
		{Session: "s1", Item: "a", TS: 1, Kind: KindView, ID: "e-1"},
		{Session: `q"uo\te`, Item: `slash/and\\back`, TS: 5, Kind: KindCart},
		{Session: "ünï", Item: "商品\u2028x", TS: MaxTS, Kind: KindPurchase, ID: "<&>"},
	}
	for _, ev := range tests {
		b := ev.AppendJSON(nil)
		if !json.Valid(b) {
			t.Fatalf("AppendJSON(%+v) = %s, not valid JSON", ev, b)
		}
		// Compare with encoding/json's reading of the same bytes.
		var ref map[string]any
		if err := json.Unmarshal(b, &ref); err != nil {
			t.Fatal(err)
		}
		if ref["session"] != ev.Session || ref["item"] != ev.Item || ref["ts"].(float64) != float64(ev.TS) {
			t.Fatalf("encoding/json reads %s as %v", b, ref)
		}
		if _, has := ref["kind"]; has != (ev.Kind != KindClick) {
			t.Fatalf("kind present=%v in %s for kind %v", has, b, ev.Kind)
		}
		if _, has := ref["id"]; has != (ev.ID != "") {
			t.Fatalf("id present=%v in %s", has, b)
		}
		got, err := DecodeJSON(b)
		if err != nil {
			t.Fatalf("DecodeJSON(%s): %v", b, err)
		}
		if got != ev {
			t.Fatalf("round trip\n got %+v\nwant %+v", got, ev)
		}
	}
	// The canonical form is exact for the common case.
	want := `{"session":"s1","item":"a","ts":1767225600000,"kind":"view","id":"e1"}`
	if got := string((Event{Session: "s1", Item: "a", TS: 1767225600000, Kind: KindView, ID: "e1"}).AppendJSON(nil)); got != want {
		t.Fatalf("AppendJSON = %s, want %s", got, want)
	}
}

func TestAppendJSONInvalidUTF8(t *testing.T) {
	// Not a valid event, but the output must still be valid JSON.
	b := Event{Session: "a\xffb", Item: "\x00", TS: 5}.AppendJSON(nil)
	if !json.Valid(b) {
		t.Fatalf("%q is not valid JSON", b)
	}
	var ref struct{ Session, Item string }
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatal(err)
	}
	if ref.Session != "a\uFFFDb" || ref.Item != "\x00" {
		t.Fatalf("encoding/json reads %q as %+v", b, ref)
	}
}

func TestKind(t *testing.T) {
	for k := KindClick; k < numKinds; k++ {
		got, err := ParseKind(k.String())
		if err != nil || got != k {
			t.Fatalf("ParseKind(%q) = %v, %v", k.String(), got, err)
		}
		txt, err := k.MarshalText()
		if err != nil || string(txt) != k.String() {
			t.Fatalf("MarshalText(%v) = %q, %v", k, txt, err)
		}
		var back Kind
		if err := back.UnmarshalText(txt); err != nil || back != k {
			t.Fatalf("UnmarshalText(%q) = %v, %v", txt, back, err)
		}
	}
	if k, err := ParseKind(""); err != nil || k != KindClick {
		t.Fatalf(`ParseKind("") = %v, %v; want click`, k, err)
	}
	for _, s := range []string{"like", "clicks", " view", "VIEW "} {
		if _, err := ParseKind(s); !errors.Is(err, ErrInvalidEvent) {
			t.Fatalf("ParseKind(%q) error = %v, want ErrInvalidEvent", s, err)
		}
	}
	if s := Kind(9).String(); s != "kind(9)" {
		t.Fatalf("Kind(9).String() = %q", s)
	}
	if _, err := Kind(9).MarshalText(); err == nil {
		t.Fatal("MarshalText of an unknown kind succeeded")
	}
}

func TestValidate(t *testing.T) {
	ok := Event{Session: "s", Item: "i", TS: 1}
	tests := []struct {
		name  string
		mod   func(*Event)
		field string
	}{
		{"ok", func(*Event) {}, ""},
		{"bad kind", func(e *Event) { e.Kind = numKinds }, "kind"},
		{"invalid utf8 session", func(e *Event) { e.Session = "a\xc3" }, "session"},
		{"DEL in id", func(e *Event) { e.ID = "a\x7f" }, "id"},
		{"control after non-ASCII", func(e *Event) { e.Item = "é\x01" }, "item"},
		{"ts beyond max", func(e *Event) { e.TS = MaxTS + 1 }, "ts"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			ev := ok
			tt.mod(&ev)
			err := ev.Validate()
			if tt.field == "" {
				if err != nil {
					t.Fatal(err)
				}
				return
			}
			var fe *FieldError
			if !errors.As(err, &fe) || fe.Field != tt.field || !errors.Is(err, ErrInvalidEvent) {
				t.Fatalf("Validate() = %v, want a field error on %q", err, tt.field)
			}
		})
	}
}

func TestEventJSONInterfaces(t *testing.T) {
	var evs []Event
	in := `[{"session":"s1","item":"a","ts":5},{"session":"s2","item":"b","ts":"2026-01-01T00:00:00Z","kind":"cart"}]`
	if err := json.Unmarshal([]byte(in), &evs); err != nil {
		t.Fatal(err)
	}
	want := []Event{{Session: "s1", Item: "a", TS: 5}, {Session: "s2", Item: "b", TS: 1767225600000, Kind: KindCart}}
	if len(evs) != 2 || evs[0] != want[0] || evs[1] != want[1] {
		t.Fatalf("got %+v, want %+v", evs, want)
	}
	out, err := json.Marshal(evs)
	if err != nil {
		t.Fatal(err)
	}
	if string(out) != `[{"session":"s1","item":"a","ts":5},{"session":"s2","item":"b","ts":1767225600000,"kind":"cart"}]` {
		t.Fatalf("json.Marshal = %s", out)
	}
	if err := json.Unmarshal([]byte(`[{"session":"s1","item":"a"}]`), &evs); !errors.Is(err, ErrInvalidEvent) {
		t.Fatalf("invalid element: error %v, want ErrInvalidEvent", err)
	}
}

// TestTSOutOfRangeNamesInput: a ts outside the accepted range is rejected
// with the number or text the producer sent, not a clamped or converted
// value (issue 12: "1e30" was reported as 253402300800000).
func TestTSOutOfRangeNamesInput(t *testing.T) {
	tests := []struct{ ts, want string }{
		{`1e30`, "got 1e30"},
		{`99999999999999999999`, "got 99999999999999999999"},
		{`"99999999999999999999"`, "got 99999999999999999999"},
		{`-99999999999999999999`, "got -99999999999999999999"},
		{`-1.5e3`, "got -1.5e3"},
		{`"0001-01-01T00:00:00Z"`, `got "0001-01-01T00:00:00Z"`},
		{`253402300800000`, "got 253402300800000"}, // an int64 past MaxTS: Validate names it as sent
	}
	for _, tt := range tests {
		t.Run(tt.ts, func(t *testing.T) {
			line := `{"session":"s1","item":"a","ts":` + tt.ts + `}`
			fast, errFast := DecodeJSON([]byte(line))
			slow, errSlow := decodeSlow([]byte(line)) // the encoding/json path, validated as DecodeJSON does
			if errSlow == nil {
				errSlow = slow.Validate()
			}
			for _, err := range []error{errFast, errSlow} {
				if err == nil {
					t.Fatalf("%s: accepted as %+v", line, fast)
				}
				if !strings.Contains(err.Error(), tt.want) {
					t.Errorf("%s: error %q does not name the input (%q)", line, err, tt.want)
				}
			}
		})
	}
}
