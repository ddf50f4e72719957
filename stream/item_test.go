package stream

import (
	"encoding/json"
	"errors"
	"reflect"
	"strings"
	"testing"
)

func TestDecodeItemJSON(t *testing.T) {
	yes, no := true, false
	tests := []struct {
		name  string
		in    string
		want  ItemRecord
		field string
		bad   bool
	}{
		{name: "minimal", in: `{"item":"p1"}`, want: ItemRecord{Item: "p1"}},
		{name: "full", in: `{"item":"p1","attrs":{"category":["garden","tools","spades"],"title":"Steel spade","tags":[]},"vector":[0.5,-1,2e-3],"available":false,"published":"2026-01-01T00:00:00Z","extra":1}`,
			want: ItemRecord{Item: "p1", Attrs: map[string][]string{"category": {"garden", "tools", "spades"}, "title": {"Steel spade"}},
				Vector: []float32{0.5, -1, 0.002}, Available: &no, Published: 1767225600000}},
		{name: "published ms", in: `{"item":"p1","published":1767225600000,"available":true}`,
			want: ItemRecord{Item: "p1", Published: 1767225600000, Available: &yes}},
		{name: "null attr dropped", in: `{"item":"p1","attrs":{"a":null,"b":"x"}}`,
			want: ItemRecord{Item: "p1", Attrs: map[string][]string{"b": {"x"}}}},

		{name: "not json", in: `{"item":`, bad: true},
		{name: "missing item", in: `{"attrs":{"a":"b"}}`, bad: true, field: "item"},
		{name: "item too long", in: `{"item":"` + strings.Repeat("x", MaxItemBytes+1) + `"}`, bad: true, field: "item"},
		{name: "attr number", in: `{"item":"p1","attrs":{"size":42}}`, bad: true, field: "attrs.size"},
		{name: "attr mixed array", in: `{"item":"p1","attrs":{"tags":["a",1]}}`, bad: true, field: "attrs.tags"},
		{name: "attrs not object", in: `{"item":"p1","attrs":["a"]}`, bad: true, field: "attrs"},
		{name: "vector strings", in: `{"item":"p1","vector":["a"]}`, bad: true, field: "vector"},
		{name: "vector overflow float32", in: `{"item":"p1","vector":[1e39]}`, bad: true, field: "vector"},
		{name: "available string", in: `{"item":"p1","available":"yes"}`, bad: true, field: "available"},
		{name: "published bad", in: `{"item":"p1","published":"soon"}`, bad: true, field: "published"},
		{name: "published negative", in: `{"item":"p1","published":-1}`, bad: true, field: "published"},
		{name: "control char in attr key", in: `{"item":"p1","attrs":{"a\u0001":"x"}}`, bad: true, field: "attrs.a\x01"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, err := DecodeItemJSON([]byte(tt.in))
			if tt.bad {
				var fe *FieldError
				if !errors.Is(err, ErrInvalidItem) || !errors.As(err, &fe) {
					t.Fatalf("DecodeItemJSON(%q) = %+v, %v; want a field error wrapping ErrInvalidItem", tt.in, got, err)
				}
				if fe.Field != tt.field {
					t.Fatalf("error %q names field %q, want %q", err, fe.Field, tt.field)
				}
				return
			}
			if err != nil {
				t.Fatalf("DecodeItemJSON(%q): %v", tt.in, err)
			}
			if !reflect.DeepEqual(got, tt.want) {
				t.Fatalf("got %+v, want %+v", got, tt.want)
			}
		})
	}
}

func TestItemLimits(t *testing.T) {
	r := ItemRecord{Item: "p", Attrs: map[string][]string{"d": {strings.Repeat("x", MaxAttrValueBytes+1)}}}
	if err := r.Validate(); !errors.Is(err, ErrInvalidItem) {
		t.Fatalf("over-long value: %v", err)
	}
	r = ItemRecord{Item: "p", Vector: make([]float32, MaxVectorLen+1)}
	if err := r.Validate(); !errors.Is(err, ErrInvalidItem) {
		t.Fatalf("over-long vector: %v", err)
	}
	attrs := map[string][]string{}
	for i := 0; i <= MaxAttrs; i++ {
		attrs[strings.Repeat("k", i+1)] = []string{"v"}
	}
	b, _ := json.Marshal(map[string]any{"item": "p", "attrs": attrs})
	if _, err := DecodeItemJSON(b); !errors.Is(err, ErrInvalidItem) {
		t.Fatalf("too many attrs: %v", err)
	}
}

func TestItemAppendJSON(t *testing.T) {
	yes := true
	r := ItemRecord{
		Item:      "p1",
		Attrs:     map[string][]string{"title": {"Steel \"spade\""}, "category": {"garden", "tools"}},
		Vector:    []float32{0.1, -3, 1e-7},
		Available: &yes,
		Published: 1767225600000,
		Seq:       9,
	}
	b := r.AppendJSON(nil)
	want := `{"item":"p1","attrs":{"category":["garden","tools"],"title":"Steel \"spade\""},"vector":[0.1,-3,1e-07],"available":true,"published":1767225600000}`
	if string(b) != want {
		t.Fatalf("AppendJSON\n got %s\nwant %s", b, want)
	}
	got, err := DecodeItemJSON(b)
	if err != nil {
		t.Fatal(err)
	}
	r.Seq = 0
	if !reflect.DeepEqual(got, r) {
		t.Fatalf("round trip: got %+v, want %+v", got, r)
	}
}
