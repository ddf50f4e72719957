package stream

import (
	"bytes"
	"encoding/json"
	"errors"
	"strconv"
	"strings"
	"unicode/utf8"
)

// DecodeJSON decodes and validates one event from one JSON object.
//
// "ts" is an RFC 3339 string or unix milliseconds (a JSON integer, a JSON
// number with a whole value, or a string of digits); unknown fields are
// ignored. Errors are *FieldError values wrapping ErrInvalidEvent and name the
// field and the reason.
//
// The common shape of an event line (a flat object with plain ASCII keys and
// unescaped string values) is parsed by a hand-written scanner without
// reflection. Anything the scanner is not sure about (escapes, nested values,
// duplicate keys, keys that differ from the field names only in case, nulls,
// malformed input) goes to encoding/json, so results never depend on which
// path ran; the fuzz target FuzzDecodeJSON checks exactly that.
func DecodeJSON(data []byte) (Event, error) {
	ev, ok := decodeFast(data)
	if !ok {
		var err error
		if ev, err = decodeSlow(data); err != nil {
			return Event{}, err
		}
	}
	// Strings from the fast path have passed the character checks already.
	if err := ev.validate(!ok); err != nil {
		return Event{}, err
	}
	return ev, nil
}

// UnmarshalJSON decodes and validates an event, so []Event can be decoded
// with encoding/json. It is DecodeJSON, including its validation.
func (e *Event) UnmarshalJSON(data []byte) error {
	ev, err := DecodeJSON(data)
	if err != nil {
		return err
	}
	*e = ev
	return nil
}

// MarshalJSON returns the canonical form written by AppendJSON.
func (e Event) MarshalJSON() ([]byte, error) { return e.AppendJSON(nil), nil }

// AppendJSON appends the canonical JSON form of e to dst:
// {"session":..,"item":..,"ts":<unix ms>,"kind":..,"id":..}, with kind
// omitted for a click and id omitted when empty. Seq is not written.
func (e Event) AppendJSON(dst []byte) []byte {
	dst = append(dst, `{"session":`...)
	dst = appendJSONString(dst, e.Session)
	dst = append(dst, `,"item":`...)
	dst = appendJSONString(dst, e.Item)
	dst = append(dst, `,"ts":`...)
	dst = strconv.AppendInt(dst, e.TS, 10)
	if e.Kind != KindClick {
		dst = append(dst, `,"kind":`...)
		dst = appendJSONString(dst, e.Kind.String())
	}
	if e.ID != "" {
		dst = append(dst, `,"id":`...)
		dst = appendJSONString(dst, e.ID)
	}
	return append(dst, '}')
}

// Field bits for the fast decoder.
const (
	fieldUnknown = iota
	fieldSession
	fieldItem
	fieldTS
	fieldKind
	fieldID
	fieldFallback // a key encoding/json might match case-insensitively
)

// decodeFast parses the common shape of an event. ok=false means "not sure,
// ask encoding/json", never "invalid": the fast path produces no errors of
// its own except the ones Validate reports on a fully parsed event.
func decodeFast(data []byte) (ev Event, ok bool) {
	var sess, item, id []byte
	var seen uint8
	n := len(data)
	i := skipWS(data, 0)
	if i >= n || data[i] != '{' {
		return ev, false
	}
	i = skipWS(data, i+1)
	if i < n && data[i] == '}' {
		i++
	} else {
		for {
			if i >= n || data[i] != '"' {
				return ev, false
			}
			field, next := matchKey(data, i)
			if next == 0 {
				ks, ke, n2, plain := scanPlainString(data, i)
				if !plain {
					return ev, false
				}
				if field = fieldOf(data[ks:ke]); field == fieldFallback {
					return ev, false
				}
				next = n2
			}
			if field != fieldUnknown {
				bit := uint8(1) << field
				if seen&bit != 0 {
					return ev, false // duplicate key: let encoding/json decide which wins
				}
				seen |= bit
			}
			i = skipWS(data, next)
			if i >= n || data[i] != ':' {
				return ev, false
			}
			i = skipWS(data, i+1)
			if i >= n {
				return ev, false
			}
			switch field {
			case fieldSession, fieldItem, fieldKind, fieldID:
				if data[i] != '"' {
					return ev, false
				}
				vs, ve, next, plain := scanPlainString(data, i)
				if !plain {
					return ev, false
				}
				v := data[vs:ve]
				switch field {
				case fieldSession:
					sess = v
				case fieldItem:
					item = v
				case fieldID:
					id = v
				case fieldKind:
					k, ok := parseKindBytes(v)
					if !ok {
						return ev, false
					}
					ev.Kind = k
				}
				i = next
			case fieldTS:
				if data[i] == '"' {
					vs, ve, next, plain := scanPlainString(data, i)
					if !plain {
						return ev, false
					}
					ts, err := parseTSText(string(data[vs:ve]))
					if err != nil {
						return ev, false
					}
					ev.TS = ts
					i = next
				} else {
					end, ok := scanNumber(data, i)
					if !ok {
						return ev, false
					}
					ts, err := parseTSNumber(data[i:end])
					if err != nil {
						return ev, false
					}
					ev.TS = ts
					i = end
				}
			default:
				end, ok := skipScalar(data, i)
				if !ok {
					return ev, false
				}
				i = end
			}
			i = skipWS(data, i)
			if i >= n {
				return ev, false
			}
			if data[i] == ',' {
				i = skipWS(data, i+1)
				continue
			}
			if data[i] != '}' {
				return ev, false
			}
			i++
			break
		}
	}
	if skipWS(data, i) != n {
		return ev, false
	}
	// One allocation for all strings of the event: they live and die together.
	var sb strings.Builder
	sb.Grow(len(sess) + len(item) + len(id))
	sb.Write(sess)
	sb.Write(item)
	sb.Write(id)
	all := sb.String()
	ev.Session = all[:len(sess)]
	ev.Item = all[len(sess) : len(sess)+len(item)]
	ev.ID = all[len(sess)+len(item):]
	return ev, true
}

// matchKey recognises the exact field names right after the opening quote
// b[i], the common case, without a general string scan. next is 0 when the
// key is something else.
func matchKey(b []byte, i int) (field, next int) {
	rest := b[i+1:]
	if len(rest) < 3 {
		return 0, 0
	}
	switch rest[0] {
	case 's':
		if len(rest) >= 8 && string(rest[:8]) == `session"` {
			return fieldSession, i + 9
		}
	case 'i':
		if string(rest[:3]) == `id"` {
			return fieldID, i + 4
		}
		if len(rest) >= 5 && string(rest[:5]) == `item"` {
			return fieldItem, i + 6
		}
	case 't':
		if string(rest[:3]) == `ts"` {
			return fieldTS, i + 4
		}
	case 'k':
		if len(rest) >= 5 && string(rest[:5]) == `kind"` {
			return fieldKind, i + 6
		}
	}
	return 0, 0
}

// fieldOf maps a key to a field. Exact names are fields; ASCII keys that are
// not a field name in any case are ignored, as encoding/json ignores them.
// A key that equals a field name apart from case, or that has non-ASCII bytes
// (encoding/json folds some of those onto ASCII letters), is left to
// encoding/json.
func fieldOf(key []byte) int {
	switch string(key) {
	case "session":
		return fieldSession
	case "item":
		return fieldItem
	case "ts":
		return fieldTS
	case "kind":
		return fieldKind
	case "id":
		return fieldID
	}
	if !JSONKeyASCII(key) {
		return fieldFallback
	}
	switch len(key) {
	case 2:
		if asciiEqualFold(key, "ts") || asciiEqualFold(key, "id") {
			return fieldFallback
		}
	case 4:
		if asciiEqualFold(key, "item") || asciiEqualFold(key, "kind") {
			return fieldFallback
		}
	case 7:
		if asciiEqualFold(key, "session") {
			return fieldFallback
		}
	}
	return fieldUnknown
}

func skipWS(b []byte, i int) int {
	for i < len(b) {
		switch b[i] {
		case ' ', '\t', '\n', '\r':
			i++
		default:
			return i
		}
	}
	return i
}

// scanPlainString scans a JSON string starting at the opening quote b[i].
// It returns the content bounds and the index after the closing quote.
// plain is false when the string has an escape, a control character, DEL or
// invalid UTF-8 (encoding/json would unescape, reject or replace the first
// three, and Validate refuses DEL), or is unterminated. A plain string
// therefore already passes Validate's character checks.
func scanPlainString(b []byte, i int) (start, end, next int, plain bool) {
	start = i + 1
	j := start + plainRun(b[start:])
	var hi byte
	for ; j < len(b); j++ {
		c := b[j]
		switch {
		case c == '"':
			if hi >= utf8.RuneSelf && !utf8.Valid(b[start:j]) {
				return 0, 0, 0, false
			}
			return start, j, j + 1, true
		case c == '\\' || c < 0x20 || c == 0x7f:
			return 0, 0, 0, false
		}
		hi |= c
	}
	return 0, 0, 0, false
}

// skipScalar skips the value of an ignored key: a string (escapes allowed,
// checked for validity), a number, true, false or null. Objects and arrays
// are left to encoding/json.
func skipScalar(b []byte, i int) (int, bool) {
	switch c := b[i]; {
	case c == '"':
		return skipString(b, i)
	case c == '-' || ('0' <= c && c <= '9'):
		return scanNumber(b, i)
	case c == 't':
		return skipLiteral(b, i, "true")
	case c == 'f':
		return skipLiteral(b, i, "false")
	case c == 'n':
		return skipLiteral(b, i, "null")
	}
	return 0, false
}

func skipLiteral(b []byte, i int, lit string) (int, bool) {
	if len(b)-i >= len(lit) && string(b[i:i+len(lit)]) == lit {
		return i + len(lit), true
	}
	return 0, false
}

// skipString skips a JSON string with escapes. Invalid UTF-8 is allowed here
// because encoding/json accepts it (and replaces it) in a value nobody reads.
func skipString(b []byte, i int) (int, bool) {
	for j := i + 1 + skipRun(b[i+1:]); j < len(b); j++ {
		switch c := b[j]; {
		case c == '"':
			return j + 1, true
		case c < 0x20:
			return 0, false
		case c == '\\':
			j++
			if j >= len(b) {
				return 0, false
			}
			switch b[j] {
			case '"', '\\', '/', 'b', 'f', 'n', 'r', 't':
			case 'u':
				if len(b)-j < 5 {
					return 0, false
				}
				for _, h := range b[j+1 : j+5] {
					if !isHex(h) {
						return 0, false
					}
				}
				j += 4
			default:
				return 0, false
			}
		}
	}
	return 0, false
}

func isHex(c byte) bool {
	return ('0' <= c && c <= '9') || ('a' <= c && c <= 'f') || ('A' <= c && c <= 'F')
}

// wireEvent is the encoding/json shape of an event, used by the fallback.
// TS stays raw because it may be a number or a string.
type wireEvent struct {
	Session string          `json:"session"`
	Item    string          `json:"item"`
	TS      json.RawMessage `json:"ts"`
	Kind    string          `json:"kind"`
	ID      string          `json:"id"`
}

// decodeSlow decodes with encoding/json and turns its errors into field
// errors. It does not validate.
func decodeSlow(data []byte) (Event, error) {
	var w wireEvent
	if err := json.Unmarshal(data, &w); err != nil {
		return Event{}, jsonError(err, ErrInvalidEvent)
	}
	ev := Event{Session: w.Session, Item: w.Item, ID: w.ID}
	k, ok := parseKindBytes([]byte(w.Kind))
	if !ok {
		return Event{}, eventErr("kind", strconv.Quote(truncate(w.Kind, 32))+" is not one of click, view, cart, purchase")
	}
	ev.Kind = k
	ts, err := decodeRawTS(w.TS, "ts", ErrInvalidEvent)
	if err != nil {
		return Event{}, err
	}
	ev.TS = ts
	return ev, nil
}

// decodeRawTS decodes a raw JSON timestamp; absent or null is 0.
func decodeRawTS(raw json.RawMessage, field string, sentinel error) (int64, error) {
	raw = bytes.TrimSpace(raw)
	if len(raw) == 0 || string(raw) == "null" {
		return 0, nil
	}
	var (
		ts  int64
		err error
	)
	switch c := raw[0]; {
	case c == '"':
		var s string
		if err = json.Unmarshal(raw, &s); err == nil {
			ts, err = parseTSText(s)
		}
	case c == '-' || ('0' <= c && c <= '9'):
		ts, err = parseTSNumber(raw)
	default:
		return 0, &FieldError{Field: field, Reason: "must be an RFC 3339 string or unix milliseconds, got " + jsonKind(c), Err: sentinel}
	}
	if err != nil {
		var fe *FieldError
		if errors.As(err, &fe) {
			return 0, &FieldError{Field: field, Reason: fe.Reason, Err: sentinel}
		}
		return 0, &FieldError{Field: field, Reason: err.Error(), Err: sentinel}
	}
	return ts, nil
}

func jsonKind(c byte) string {
	switch c {
	case '{':
		return "object"
	case '[':
		return "array"
	case 't', 'f':
		return "bool"
	case '"':
		return "string"
	}
	return "number"
}

// jsonError turns an encoding/json error into a *FieldError.
func jsonError(err error, sentinel error) error {
	var se *json.SyntaxError
	var te *json.UnmarshalTypeError
	switch {
	case errors.As(err, &se):
		return &FieldError{Reason: "malformed JSON: " + se.Error() + " (byte " + strconv.FormatInt(se.Offset, 10) + ")", Err: sentinel}
	case errors.As(err, &te):
		if te.Field == "" {
			return &FieldError{Reason: "expected a JSON object, got " + te.Value, Err: sentinel}
		}
		return &FieldError{Field: te.Field, Reason: "must be " + goTypeName(te.Type.String()) + ", got " + te.Value, Err: sentinel}
	}
	return &FieldError{Reason: "malformed JSON: " + err.Error(), Err: sentinel}
}

func goTypeName(t string) string {
	switch t {
	case "string":
		return "a string"
	case "bool", "*bool":
		return "true or false"
	case "float32", "float64":
		return "a number that fits " + t
	case "[]float32":
		return "an array of numbers"
	}
	if strings.HasPrefix(t, "map[") {
		return "an object"
	}
	return t
}

// appendJSONString appends s as a JSON string in the canonical form. It
// escapes what JSON requires, replaces invalid UTF-8 with U+FFFD as
// encoding/json does, and escapes U+2028/U+2029 so the output is also safe
// inside JavaScript.
func appendJSONString(dst []byte, s string) []byte { return appendQuoted(dst, s, false) }

// AppendJSONStringStd appends s quoted exactly as encoding/json's Encoder
// writes it with its default HTML escaping: the canonical form's escapes,
// and also <, > and & as \u003c, \u003e, \u0026 and \b, \f in short form.
// Hand-written encoders of API answers use it to match encoding/json byte
// for byte.
func AppendJSONStringStd(dst []byte, s string) []byte { return appendQuoted(dst, s, true) }

func appendQuoted(dst []byte, s string, std bool) []byte {
	const hex = "0123456789abcdef"
	dst = append(dst, '"')
	start := 0
	for i := 0; i < len(s); {
		c := s[i]
		if c < utf8.RuneSelf {
			if c >= 0x20 && c != '"' && c != '\\' && (!std || (c != '<' && c != '>' && c != '&')) {
				i++
				continue
			}
			dst = append(dst, s[start:i]...)
			switch {
			case c == '"' || c == '\\':
				dst = append(dst, '\\', c)
			case c == '\n':
				dst = append(dst, '\\', 'n')
			case c == '\r':
				dst = append(dst, '\\', 'r')
			case c == '\t':
				dst = append(dst, '\\', 't')
			case std && c == '\b':
				dst = append(dst, '\\', 'b')
			case std && c == '\f':
				dst = append(dst, '\\', 'f')
			default:
				dst = append(dst, '\\', 'u', '0', '0', hex[c>>4], hex[c&0xf])
			}
			i++
			start = i
			continue
		}
		r, size := utf8.DecodeRuneInString(s[i:])
		if r == utf8.RuneError && size == 1 {
			dst = append(dst, s[start:i]...)
			dst = append(dst, `\ufffd`...)
			i++
			start = i
			continue
		}
		if r == '\u2028' || r == '\u2029' {
			dst = append(dst, s[start:i]...)
			dst = append(dst, '\\', 'u', '2', '0', '2', hex[r&0xf])
			i += size
			start = i
			continue
		}
		i += size
	}
	dst = append(dst, s[start:]...)
	return append(dst, '"')
}
