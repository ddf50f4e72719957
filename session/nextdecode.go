package session

import (
	"math"
	"strings"
	"unicode"
	"unicode/utf16"
	"unicode/utf8"

	"waymark/stream"
)

// decodeNextFast decodes the body of POST /v1/next into the nextBody that
// encoding/json decodes from it into a zero nextBody (unmarshalBody, what
// decodeBody runs), or reports false, with a zero nextBody, for any body
// it is not sure about, so that the caller falls back to encoding/json and
// to its error message. Under HTTP load the reflection of encoding/json's
// decoder and its allocation of every string and slice on its own were
// about 7 % of serve's CPU; this decoder allocates once for all strings of
// the body, once for all their slices and once for k.
//
// It takes an object of the fields of nextBody, spelled exactly as in
// wire.go, once each, with strings (escapes included), integers for k and
// timeout_ms, true or false for keep_session_items, arrays of strings for
// the lists, an object for prefer and null for any of them; only JSON
// whitespace may follow. It bails on any other key (unmarshalBody refuses
// unknown keys and names them), on a key that is a field name in another
// case or has a non-ASCII byte or an escape (encoding/json matches keys
// case-insensitively, Unicode folds included), a repeated field
// (encoding/json merges or reuses), null in an array, a number with a
// fraction or an exponent or more than 18 digits, and of course on
// malformed JSON and on any value of the wrong type. TestNextDecodeMatchesEncodingJSON and
// FuzzNextBodyDecode hold it to encoding/json.
func decodeNextFast(data []byte) (body nextBody, ok bool) {
	if len(data) > math.MaxInt32/4 { // offsets are int32, and U+FFFD triples a byte
		return nextBody{}, false
	}
	d := nextDecoder{data: data}
	var f nextFields
	d.ws()
	if d.peek() != '{' || !d.object(&f, false) {
		return nextBody{}, false
	}
	if d.ws(); d.i != len(d.data) {
		return nextBody{}, false
	}
	// One allocation for every string of the body: they live and die
	// together. Escapes only shrink a string; the U+FFFD of a byte of
	// invalid UTF-8 grows it, and the builder then grows.
	n := d.n
	size := 0
	for j := range n {
		sp := d.span(j)
		size += int(sp.end - sp.start)
	}
	var sb strings.Builder
	sb.Grow(size)
	for j := range n {
		sp := d.span(j)
		if sp.esc {
			appendUnquoted(&sb, data[sp.start:sp.end])
		} else {
			sb.Write(data[sp.start:sp.end])
		}
		sp.out = int32(sb.Len())
	}
	all := sb.String()
	str := func(j int) string {
		start := int32(0)
		if j > 0 {
			start = d.span(j - 1).out
		}
		return all[start:d.span(j).out]
	}
	var vals []string
	if f.listed > 0 {
		vals = make([]string, n)
		for j := range n {
			vals[j] = str(j)
		}
	}
	body = nextBody{
		Items:     f.items.slice(vals),
		Keep:      f.keep,
		Exclude:   f.exclude.slice(vals),
		Context:   f.context.slice(vals),
		TimeoutMS: f.timeout,
	}
	if f.session > 0 {
		body.Session = str(f.session - 1)
	}
	if f.category > 0 {
		body.Category = str(f.category - 1)
	}
	if f.kSet {
		k := f.k
		body.K = &k
	}
	if f.prefer {
		body.Prefer = &preferBody{Items: f.preferItems.slice(vals), Categories: f.preferCats.slice(vals)}
	}
	return body, true
}

// nextDecoder walks a body and notes where each string value is, the
// first ones in an array kept on the stack (a slice of it stored in the
// decoder would move it to the heap), the rest in a slice.
type nextDecoder struct {
	data  []byte
	i     int
	n     int // strings found
	spans [32]strSpan
	more  []strSpan
}

// strSpan is a string value: its content data[start:end] between the
// quotes, whether it needs unquoting (an escape or invalid UTF-8), and
// where it ends in the joined strings.
type strSpan struct {
	start, end, out int32
	esc             bool
}

func (d *nextDecoder) span(j int) *strSpan {
	if j < len(d.spans) {
		return &d.spans[j]
	}
	return &d.more[j-len(d.spans)]
}

func (d *nextDecoder) add(sp strSpan) {
	if d.n < len(d.spans) {
		d.spans[d.n] = sp
	} else {
		d.more = append(d.more, sp)
	}
	d.n++
}

// nextFields is what the walk found, before the strings are allocated.
type nextFields struct {
	session, category int // 1 + the string's index, 0 for none
	items, exclude    strList
	context           strList
	preferItems       strList
	preferCats        strList
	listed            int // strings in lists
	k, timeout        int
	kSet, keep        bool
	prefer            bool
}

// strList is an array of strings: n strings from index first. set is false
// for an absent or null array (a nil slice), true for [] (an empty one).
type strList struct {
	first, n int
	set      bool
}

func (l strList) slice(vals []string) []string {
	if !l.set {
		return nil
	}
	if l.n == 0 {
		return []string{}
	}
	// Capped, so that an append by a reader copies instead of writing
	// over the next list.
	return vals[l.first : l.first+l.n : l.first+l.n]
}

// Fields of nextBody and preferBody; a bit each in an object's seen set.
const (
	fldUnknown = iota
	fldSession
	fldItems
	fldK
	fldKeep
	fldCategory
	fldExclude
	fldContext
	fldPrefer
	fldTimeout
	fldPreferItems
	fldPreferCats
	fldBail // a key encoding/json might match by folding case
)

// nextField maps a key of the top object (prefer false) or of prefer to
// its field. A key that differs from a field name only in case, or has
// bytes outside ASCII (encoding/json folds some of those onto ASCII
// letters, as the Kelvin sign onto k), is fldBail; any other is ignored.
func nextField(key []byte, prefer bool) int {
	if prefer {
		switch string(key) {
		case "items":
			return fldPreferItems
		case "categories":
			return fldPreferCats
		}
	} else {
		switch string(key) {
		case "session":
			return fldSession
		case "items":
			return fldItems
		case "k":
			return fldK
		case "keep_session_items":
			return fldKeep
		case "category":
			return fldCategory
		case "exclude":
			return fldExclude
		case "context":
			return fldContext
		case "prefer":
			return fldPrefer
		case "timeout_ms":
			return fldTimeout
		}
	}
	if !stream.JSONKeyASCII(key) {
		return fldBail
	}
	names := []string{"session", "items", "k", "keep_session_items", "category", "exclude", "context", "prefer", "timeout_ms"}
	if prefer {
		names = []string{"items", "categories"}
	}
	for _, name := range names {
		if stream.ASCIIEqualFold(key, name) {
			return fldBail
		}
	}
	return fldUnknown
}

// peek returns the byte at the position, or 0 at the end (0 is valid
// nowhere a caller peeks).
func (d *nextDecoder) peek() byte {
	if d.i < len(d.data) {
		return d.data[d.i]
	}
	return 0
}

func (d *nextDecoder) ws() { d.i = stream.SkipJSONSpace(d.data, d.i) }

// object reads the object at '{' into f: the top one, or prefer's.
func (d *nextDecoder) object(f *nextFields, prefer bool) bool {
	d.i++
	d.ws()
	if d.peek() == '}' {
		d.i++
		return true
	}
	var seen uint32
	for {
		if d.peek() != '"' {
			return false
		}
		key, ok := d.key()
		if !ok {
			return false
		}
		field := nextField(key, prefer)
		if field == fldBail || field == fldUnknown {
			// encoding/json, told to refuse unknown keys, names the key in
			// its error: the fast path takes only bodies it would accept.
			return false
		}
		if field != fldUnknown {
			if seen&(1<<field) != 0 {
				return false // encoding/json would merge or reuse: leave it to it
			}
			seen |= 1 << field
		}
		d.ws()
		if d.peek() != ':' {
			return false
		}
		d.i++
		d.ws()
		if !d.value(f, field) {
			return false
		}
		d.ws()
		switch d.peek() {
		case ',':
			d.i++
			d.ws()
		case '}':
			d.i++
			return true
		default:
			return false
		}
	}
}

// key reads a key at '"' with no escape, control character or non-ASCII
// byte in it (those are left to encoding/json), and returns its bytes.
func (d *nextDecoder) key() ([]byte, bool) {
	start := d.i + 1
	for j := start; j < len(d.data); j++ {
		switch c := d.data[j]; {
		case c == '"':
			d.i = j + 1
			return d.data[start:j], true
		case c == '\\' || c < 0x20:
			return nil, false
		}
	}
	return nil, false
}

// value reads the value of field at the position into f.
func (d *nextDecoder) value(f *nextFields, field int) bool {
	c := d.peek()
	if c == 'n' && field != fldUnknown {
		// null leaves a string, a bool and an int as they were (zero
		// here) and makes a slice or a pointer nil.
		return d.literal("null")
	}
	switch field {
	case fldSession, fldCategory:
		if c != '"' || !d.str() {
			return false
		}
		if field == fldSession {
			f.session = d.n
		} else {
			f.category = d.n
		}
		return true
	case fldItems:
		return d.list(f, &f.items)
	case fldExclude:
		return d.list(f, &f.exclude)
	case fldContext:
		return d.list(f, &f.context)
	case fldPreferItems:
		return d.list(f, &f.preferItems)
	case fldPreferCats:
		return d.list(f, &f.preferCats)
	case fldK:
		f.kSet = true
		return d.integer(&f.k)
	case fldTimeout:
		return d.integer(&f.timeout)
	case fldKeep:
		switch c {
		case 't':
			f.keep = true
			return d.literal("true")
		case 'f':
			return d.literal("false")
		}
		return false
	case fldPrefer:
		if c != '{' {
			return false
		}
		f.prefer = true
		return d.object(f, true)
	}
	return d.skipScalar()
}

func (d *nextDecoder) literal(lit string) bool {
	if len(d.data)-d.i >= len(lit) && string(d.data[d.i:d.i+len(lit)]) == lit {
		d.i += len(lit)
		return true
	}
	return false
}

// list reads an array of strings at the position into l.
func (d *nextDecoder) list(f *nextFields, l *strList) bool {
	if d.peek() != '[' {
		return false
	}
	d.i++
	l.set, l.first = true, d.n
	d.ws()
	if d.peek() == ']' {
		d.i++
		return true
	}
	for {
		if d.peek() != '"' || !d.str() {
			return false // null in an array among them
		}
		l.n++
		f.listed++
		d.ws()
		switch d.peek() {
		case ',':
			d.i++
			d.ws()
		case ']':
			d.i++
			return true
		default:
			return false
		}
	}
}

// integer reads -?(0|[1-9][0-9]*) of at most 18 digits, which fits an int
// of 64 bits; a fraction or exponent after it fails the caller's check for
// ',' or '}' (encoding/json refuses them for an int too).
func (d *nextDecoder) integer(v *int) bool {
	j := d.i
	neg := j < len(d.data) && d.data[j] == '-'
	if neg {
		j++
	}
	start := j
	var n int64
	if j < len(d.data) && d.data[j] == '0' {
		j++
	} else {
		for j < len(d.data) && '0' <= d.data[j] && d.data[j] <= '9' {
			n = n*10 + int64(d.data[j]-'0')
			j++
		}
	}
	if j == start || j-start > 18 || n != int64(int(n)) {
		return false
	}
	if neg {
		n = -n
	}
	*v = int(n)
	d.i = j
	return true
}

// str reads the string at '"' and notes its span. A string with an
// escape or a byte outside ASCII is checked as encoding/json's scanner
// checks it: the JSON escapes only, no control character.
func (d *nextDecoder) str() bool {
	b := d.data
	start := d.i + 1
	j := start
	for ; j < len(b); j++ {
		c := b[j]
		if c == '"' {
			d.add(strSpan{start: int32(start), end: int32(j)})
			d.i = j + 1
			return true
		}
		if c == '\\' || c < 0x20 || c >= utf8.RuneSelf {
			break
		}
	}
	esc := false
	for ; j < len(b); j++ {
		switch c := b[j]; {
		case c == '"':
			// Valid UTF-8 is copied as it is; invalid needs U+FFFD.
			esc = esc || !utf8.Valid(b[start:j])
			d.add(strSpan{start: int32(start), end: int32(j), esc: esc})
			d.i = j + 1
			return true
		case c < 0x20:
			return false
		case c == '\\':
			esc = true
			if j+1 >= len(b) {
				return false
			}
			switch b[j+1] {
			case '"', '\\', '/', 'b', 'f', 'n', 'r', 't':
				j++
			case 'u':
				if hex4(b, j) < 0 {
					return false
				}
				j += 5
			default:
				return false
			}
		}
	}
	return false
}

// appendUnquoted writes the content of a string that str checked, decoded
// as encoding/json's unquote decodes it: a lone or broken surrogate and
// each byte of invalid UTF-8 become U+FFFD.
func appendUnquoted(sb *strings.Builder, s []byte) {
	for j := 0; j < len(s); {
		switch c := s[j]; {
		case c == '\\':
			switch e := s[j+1]; e {
			case 'b':
				sb.WriteByte('\b')
			case 'f':
				sb.WriteByte('\f')
			case 'n':
				sb.WriteByte('\n')
			case 'r':
				sb.WriteByte('\r')
			case 't':
				sb.WriteByte('\t')
			case 'u':
				r := hex4(s, j)
				j += 6
				if utf16.IsSurrogate(r) {
					if dec := utf16.DecodeRune(r, hex4(s, j)); dec != unicode.ReplacementChar {
						sb.WriteRune(dec)
						j += 6
						continue
					}
					r = unicode.ReplacementChar
				}
				sb.WriteRune(r)
				continue
			default: // " \ /
				sb.WriteByte(e)
			}
			j += 2
		case c < utf8.RuneSelf:
			sb.WriteByte(c)
			j++
		default:
			r, size := utf8.DecodeRune(s[j:])
			sb.WriteRune(r)
			j += size
		}
	}
}

// hex4 reads the escape \uXXXX at b[j], or returns -1.
func hex4(b []byte, j int) rune {
	if len(b)-j < 6 || b[j] != '\\' || b[j+1] != 'u' {
		return -1
	}
	var r rune
	for _, c := range b[j+2 : j+6] {
		switch {
		case '0' <= c && c <= '9':
			c -= '0'
		case 'a' <= c && c <= 'f':
			c = c - 'a' + 10
		case 'A' <= c && c <= 'F':
			c = c - 'A' + 10
		default:
			return -1
		}
		r = r*16 + rune(c)
	}
	return r
}

// skipScalar skips the value of an ignored key: a string, a number, true,
// false or null, each checked as encoding/json's scanner checks it (it
// accepts invalid UTF-8 in a string). Objects and arrays are left to
// encoding/json.
func (d *nextDecoder) skipScalar() bool {
	next, ok := stream.SkipJSONScalar(d.data, d.i)
	if ok {
		d.i = next
	}
	return ok
}
