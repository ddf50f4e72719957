package session

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"reflect"
	"strings"
)

// unmarshalBody decodes b, one JSON value with only whitespace after it,
// into v with encoding/json, refusing keys that name no field of v (a
// mistyped key would otherwise be dropped without a word, and the request
// answered as if it had not been sent). The error is in the API's words
// (describeJSONError), never Go's type names.
func unmarshalBody(b []byte, v any) error {
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.DisallowUnknownFields()
	if err := dec.Decode(v); err != nil {
		return errors.New(describeJSONError(err, reflect.TypeOf(v)))
	}
	if len(bytes.TrimSpace(b[dec.InputOffset():])) > 0 { // dec.More misses a trailing } or ]
		return errors.New("more than one JSON value")
	}
	return nil
}

// fieldHints say more than the JSON type for fields people get wrong.
var fieldHints = map[string]string{
	"context": `an array of "key=value" strings, e.g. ["category=camping"]`,
}

// describeJSONError says what encoding/json refused in a body decoded into
// a value of type t: an unknown key (with the keys t has), a value of the
// wrong JSON type (with the field's path and the type it takes), or where
// the JSON itself breaks.
func describeJSONError(err error, t reflect.Type) string {
	var syn *json.SyntaxError
	var typ *json.UnmarshalTypeError
	switch {
	case errors.Is(err, io.EOF):
		return "the body is empty: send a JSON object"
	case errors.Is(err, io.ErrUnexpectedEOF):
		return "the body ends inside its JSON value"
	case errors.As(err, &syn):
		return fmt.Sprintf("not valid JSON at byte %d: %s", syn.Offset, syn.Error())
	case errors.As(err, &typ):
		want := jsonKind(typ.Type)
		if h, ok := fieldHints[typ.Field]; ok {
			want = h
		}
		got := typ.Value
		if i := strings.IndexByte(got, ' '); i > 0 {
			got = got[:i] // "number 1.5": the kind is enough beside the path
		}
		if typ.Field == "" {
			return fmt.Sprintf("the body must be %s, not %s", want, article(got))
		}
		if ft := fieldType(t, typ.Field); ft != nil && ft.Kind() == reflect.Slice && ft.Elem() == typ.Type {
			// encoding/json names the entry's type for a bad entry.
			if h, ok := fieldHints[typ.Field]; ok {
				return fmt.Sprintf("%q must be %s; an entry is %s", typ.Field, h, article(got))
			}
			return fmt.Sprintf("%q must be %s; an entry is %s", typ.Field, jsonKind(ft), article(got))
		}
		return fmt.Sprintf("%q must be %s, not %s", typ.Field, want, article(got))
	}
	// encoding/json has no error type for an unknown key.
	if key, ok := strings.CutPrefix(err.Error(), "json: unknown field "); ok {
		return fmt.Sprintf("unknown key %s; the keys are %s", key, knownKeys(t))
	}
	return strings.TrimPrefix(err.Error(), "json: ")
}

// fieldType returns the Go type of the field at a dotted path of JSON
// names ("requests.items") below type t, or nil.
func fieldType(t reflect.Type, path string) reflect.Type {
	for _, name := range strings.Split(path, ".") {
		for t.Kind() == reflect.Pointer || t.Kind() == reflect.Slice {
			t = t.Elem()
		}
		if t.Kind() != reflect.Struct {
			return nil
		}
		found := false
		for i := range t.NumField() {
			f := t.Field(i)
			if tag, _, _ := strings.Cut(f.Tag.Get("json"), ","); tag == name || (tag == "" && f.Name == name) {
				t, found = f.Type, true
				break
			}
		}
		if !found {
			return nil
		}
	}
	return t
}

// article puts "a" or "an" before a JSON kind as encoding/json names it.
func article(kind string) string {
	switch kind {
	case "object", "array":
		return "an " + kind
	case "bool":
		return "true or false"
	}
	return "a " + kind
}

// jsonKind names the JSON a Go type takes.
func jsonKind(t reflect.Type) string {
	for t.Kind() == reflect.Pointer {
		t = t.Elem()
	}
	switch t.Kind() {
	case reflect.String:
		return "a string"
	case reflect.Bool:
		return "true or false"
	case reflect.Int, reflect.Int8, reflect.Int16, reflect.Int32, reflect.Int64,
		reflect.Uint, reflect.Uint8, reflect.Uint16, reflect.Uint32, reflect.Uint64:
		return "an integer"
	case reflect.Float32, reflect.Float64:
		return "a number"
	case reflect.Slice, reflect.Array:
		switch e := jsonKind(t.Elem()); {
		case e == "true or false":
			return "an array of true or false"
		case strings.HasPrefix(e, "an array"):
			return "an array of arrays"
		default:
			_, noun, _ := strings.Cut(e, " ")
			return "an array of " + noun + "s"
		}
	}
	return "an object"
}

// knownKeys lists the JSON keys of struct type t, with those of nested
// objects in parentheses: "items, k, prefer (items, categories)".
func knownKeys(t reflect.Type) string {
	for t.Kind() == reflect.Pointer || t.Kind() == reflect.Slice {
		t = t.Elem()
	}
	if t.Kind() != reflect.Struct {
		return "none"
	}
	var keys []string
	for i := range t.NumField() {
		f := t.Field(i)
		name, _, _ := strings.Cut(f.Tag.Get("json"), ",")
		if !f.IsExported() || name == "-" {
			continue
		}
		if name == "" {
			name = f.Name
		}
		inner := f.Type
		for inner.Kind() == reflect.Pointer || inner.Kind() == reflect.Slice {
			inner = inner.Elem()
		}
		if inner.Kind() == reflect.Struct {
			name += " (" + knownKeys(inner) + ")"
		}
		keys = append(keys, name)
	}
	return strings.Join(keys, ", ")
}
