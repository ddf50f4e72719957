package stream

import "unicode/utf8"

// The scanning steps of the event decoder, for the other hand-written
// decoders of the project (session's request decoder), so JSON's grammar
// of whitespace, numbers, strings and literals is written once.

// SkipJSONSpace returns the index of the first byte at or after i that is
// not JSON whitespace (space, tab, newline, carriage return).
func SkipJSONSpace(b []byte, i int) int { return skipWS(b, i) }

// SkipJSONScalar skips the JSON string (escapes checked, invalid UTF-8
// allowed, as encoding/json allows it), number, true, false or null that
// starts at b[i] and returns the index after it. ok is false for anything
// else, an invalid scalar, or i at the end of b.
func SkipJSONScalar(b []byte, i int) (next int, ok bool) {
	if i >= len(b) {
		return 0, false
	}
	return skipScalar(b, i)
}

// ASCIIEqualFold reports whether b equals lower (lower-case ASCII) apart
// from the case of ASCII letters.
func ASCIIEqualFold(b []byte, lower string) bool { return asciiEqualFold(b, lower) }

// JSONKeyASCII reports whether a JSON object key is all ASCII. A decoder
// matches such a key to its fields case-insensitively itself (what
// encoding/json does); any other key needs Unicode case folding, so it is
// left to encoding/json.
func JSONKeyASCII(key []byte) bool {
	for _, c := range key {
		if c >= utf8.RuneSelf {
			return false
		}
	}
	return true
}
