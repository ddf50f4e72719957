package stream

import (
	"math"
	"strconv"
	"time"
)

// Timestamps arrive in three shapes: a JSON integer of unix milliseconds (the
// common, fast case), an RFC 3339 string, or text in a CSV cell that may be
// either. All decoders go through the functions below so that every path
// (fast JSON, encoding/json fallback, CSV) agrees on every input.

// parseTSNumber parses the text of a JSON number as unix milliseconds. The
// text must already match the JSON number grammar. Integers are taken as they
// are; a number written with a fraction or exponent is accepted when its value
// is whole (1.7672256e12), because some producers emit every number as a
// float.
func parseTSNumber(tok []byte) (int64, error) {
	// Fast path: plain digits that cannot overflow int64.
	if n := len(tok); n > 0 && n <= 18 {
		var v int64
		i := 0
		neg := tok[0] == '-'
		if neg {
			i = 1
		}
		ok := i < n
		for ; i < n; i++ {
			c := tok[i]
			if c < '0' || c > '9' {
				ok = false
				break
			}
			v = v*10 + int64(c-'0')
		}
		if ok {
			if neg {
				v = -v
			}
			return v, nil
		}
	}
	s := string(tok)
	if v, err := strconv.ParseInt(s, 10, 64); err == nil {
		return v, nil
	}
	f, err := strconv.ParseFloat(s, 64)
	if err != nil || math.IsInf(f, 0) || math.IsNaN(f) {
		return 0, eventErr("ts", "number "+truncate(s, 40)+" is out of range")
	}
	if f != math.Trunc(f) {
		return 0, eventErr("ts", "number "+truncate(s, 40)+" has a fraction; expected whole unix milliseconds")
	}
	// Beyond MaxTS the conversion below is undefined. Reject here, naming
	// the number as written: a clamped value in the message would name a
	// time the producer never sent.
	if f > float64(MaxTS) {
		return 0, eventErr("ts", "must not be after year 9999, got "+truncate(s, 40))
	}
	if f < 0 {
		return 0, eventErr("ts", "must be after 1970-01-01T00:00:00Z, got "+truncate(s, 40))
	}
	return int64(f), nil
}

// parseTSText parses a timestamp written as text: a JSON-number-shaped string
// is unix milliseconds, anything else must be RFC 3339. Used for JSON string
// values and CSV cells.
func parseTSText(s string) (int64, error) {
	if s == "" {
		return 0, nil // missing; Validate reports it
	}
	if end, ok := scanNumber([]byte(s), 0); ok && end == len(s) {
		return parseTSNumber([]byte(s))
	}
	t, err := time.Parse(time.RFC3339Nano, s)
	if err != nil {
		return 0, eventErr("ts", strconv.Quote(truncate(s, 40))+" is neither RFC 3339 nor unix milliseconds")
	}
	if t.Before(time.Unix(0, 0)) {
		// Name the time as written, not its negative milliseconds.
		return 0, eventErr("ts", "must be after 1970-01-01T00:00:00Z, got "+strconv.Quote(truncate(s, 40)))
	}
	return t.UnixMilli(), nil
}

// scanNumber matches the JSON number grammar
// -?(0|[1-9][0-9]*)(\.[0-9]+)?([eE][+-]?[0-9]+)? starting at b[i]. It returns
// the index just past the number; ok is false when b[i:] does not start with a
// number.
func scanNumber(b []byte, i int) (end int, ok bool) {
	n := len(b)
	if i < n && b[i] == '-' {
		i++
	}
	if i >= n {
		return 0, false
	}
	switch c := b[i]; {
	case c == '0':
		i++
	case '1' <= c && c <= '9':
		i++
		for i < n && '0' <= b[i] && b[i] <= '9' {
			i++
		}
	default:
		return 0, false
	}
	if i < n && b[i] == '.' {
		i++
		start := i
		for i < n && '0' <= b[i] && b[i] <= '9' {
			i++
		}
		if i == start {
			return 0, false
		}
	}
	if i < n && (b[i] == 'e' || b[i] == 'E') {
		i++
		if i < n && (b[i] == '+' || b[i] == '-') {
			i++
		}
		start := i
		for i < n && '0' <= b[i] && b[i] <= '9' {
			i++
		}
		if i == start {
			return 0, false
		}
	}
	return i, true
}
