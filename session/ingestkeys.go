package session

import (
	"encoding/json"
	"fmt"
	"strings"
)

// The top-level keys POST /v1/events and POST /v1/items take
// (stream/FORMAT.md sections 1 and 2). The bus and files ignore other
// keys, as the format promises to any producer; the HTTP door refuses
// them, so that a mistyped optional key ("knd":"purchase") is not read as
// a click without one. Catalogue attributes stay free: they live inside
// "attrs", whose keys are not checked here.
var (
	eventKeys = []string{"session", "item", "ts", "kind", "id"}
	itemKeys  = []string{"item", "attrs", "vector", "available", "published"}
)

// checkKeys returns an error naming the first top-level key of the JSON
// object rec that is not in known (matched as encoding/json matches keys:
// exactly or else ignoring case), or nil. It does not validate rec: on
// anything but an object it returns nil and leaves the error to the
// record's decoder.
func checkKeys(rec []byte, known []string) error {
	key, ok := firstUnknownKey(rec, known)
	if !ok {
		return nil
	}
	return fmt.Errorf("unknown key %q; the keys are %s", key, strings.Join(known, ", "))
}

func firstUnknownKey(b []byte, known []string) (string, bool) {
	i := skipSpace(b, 0)
	if i >= len(b) || b[i] != '{' {
		return "", false
	}
	i++
	for {
		i = skipSpace(b, i)
		if i >= len(b) || b[i] != '"' {
			return "", false // '}' of an empty object, or not JSON
		}
		end := skipString(b, i)
		if end < 0 {
			return "", false
		}
		if !exactKey(b[i+1:end-1], known) { // the usual key costs no allocation
			var key string
			if json.Unmarshal(b[i:end], &key) != nil {
				return "", false
			}
			if !knownKey(key, known) {
				return key, true
			}
		}
		i = skipSpace(b, end)
		if i >= len(b) || b[i] != ':' {
			return "", false
		}
		if i = skipValue(b, i+1); i < 0 {
			return "", false
		}
		i = skipSpace(b, i)
		if i >= len(b) || b[i] != ',' {
			return "", false // '}' ends the object
		}
		i++
	}
}

// exactKey reports whether raw, a key's bytes between its quotes, is one
// of known as written.
func exactKey(raw []byte, known []string) bool {
	for _, k := range known {
		if string(raw) == k {
			return true
		}
	}
	return false
}

func knownKey(key string, known []string) bool {
	for _, k := range known {
		if key == k || strings.EqualFold(key, k) {
			return true
		}
	}
	return false
}

func skipSpace(b []byte, i int) int {
	for i < len(b) && (b[i] == ' ' || b[i] == '\t' || b[i] == '\r' || b[i] == '\n') {
		i++
	}
	return i
}

// skipString returns the index after the string that starts at b[i] == '"',
// or -1 when it does not end.
func skipString(b []byte, i int) int {
	for j := i + 1; j < len(b); j++ {
		switch b[j] {
		case '\\':
			j++
		case '"':
			return j + 1
		}
	}
	return -1
}

// skipValue returns the index after the value that starts at or after
// b[i] (nested objects and arrays included), or -1 when it does not end.
func skipValue(b []byte, i int) int {
	i = skipSpace(b, i)
	depth := 0
	for i < len(b) {
		switch c := b[i]; c {
		case '"':
			if i = skipString(b, i); i < 0 {
				return -1
			}
			if depth == 0 {
				return i
			}
			continue
		case '{', '[':
			depth++
		case '}', ']':
			if depth == 0 {
				return i // the end of the enclosing object
			}
			if depth--; depth == 0 {
				return i + 1
			}
		case ',':
			if depth == 0 {
				return i
			}
		}
		i++
	}
	return -1
}
