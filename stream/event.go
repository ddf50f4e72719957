package stream

import (
	"strconv"
	"unicode/utf8"
)

// Size limits of the event fields, in bytes.
const (
	MaxSessionBytes = 128
	MaxItemBytes    = 256
	MaxIDBytes      = 128
)

// MaxTS is the latest event time accepted: 9999-12-31T23:59:59.999Z in unix
// milliseconds. Capping here keeps every accepted time printable as RFC 3339
// (four-digit years) and far from int64 overflow in later arithmetic.
const MaxTS int64 = 253402300799999

// Kind is what the visitor did with the item. The zero value is KindClick, so
// an event without a kind is a click.
type Kind uint8

const (
	KindClick Kind = iota
	KindView
	KindCart
	KindPurchase

	numKinds
)

// String returns the wire name of k ("click", "view", "cart", "purchase").
func (k Kind) String() string {
	switch k {
	case KindClick:
		return "click"
	case KindView:
		return "view"
	case KindCart:
		return "cart"
	case KindPurchase:
		return "purchase"
	}
	return "kind(" + strconv.Itoa(int(k)) + ")"
}

// ParseKind parses a wire name. Case is ignored (ASCII only) and the empty
// string is a click, because producers that do not distinguish kinds should
// not have to send one.
func ParseKind(s string) (Kind, error) {
	if k, ok := parseKindBytes([]byte(s)); ok {
		return k, nil
	}
	return 0, eventErr("kind", strconv.Quote(truncate(s, 32))+" is not one of click, view, cart, purchase")
}

// parseKindBytes is the allocation-free core of ParseKind for the decoders.
func parseKindBytes(b []byte) (Kind, bool) {
	switch len(b) {
	case 0:
		return KindClick, true
	case 4:
		if asciiEqualFold(b, "view") {
			return KindView, true
		}
		if asciiEqualFold(b, "cart") {
			return KindCart, true
		}
	case 5:
		if asciiEqualFold(b, "click") {
			return KindClick, true
		}
	case 8:
		if asciiEqualFold(b, "purchase") {
			return KindPurchase, true
		}
	}
	return 0, false
}

// MarshalText makes Kind usable in JSON, flags and config files.
func (k Kind) MarshalText() ([]byte, error) {
	if k >= numKinds {
		return nil, eventErr("kind", "unknown kind "+strconv.Itoa(int(k)))
	}
	return []byte(k.String()), nil
}

// UnmarshalText parses a wire name (see ParseKind).
func (k *Kind) UnmarshalText(b []byte) error {
	v, ok := parseKindBytes(b)
	if !ok {
		_, err := ParseKind(string(b))
		return err
	}
	*k = v
	return nil
}

// Event is one visitor action on one item at one moment of event time.
type Event struct {
	Session string // 1..MaxSessionBytes bytes, required
	Item    string // 1..MaxItemBytes bytes, required
	TS      int64  // event time, unix milliseconds, required (> 0)
	Kind    Kind
	ID      string // optional, <= MaxIDBytes bytes, for de-duplication
	// Seq is the JetStream stream sequence when the event came from the bus,
	// else 0. It is not part of the wire format.
	Seq uint64
}

// Validate reports the first problem with e. The error is a *FieldError
// wrapping ErrInvalidEvent.
func (e *Event) Validate() error { return e.validate(true) }

// validate skips the per-byte character checks when chars is false, for
// strings the fast decoder has already scanned.
func (e *Event) validate(chars bool) error {
	if err := validateID("session", e.Session, MaxSessionBytes, true, chars, ErrInvalidEvent); err != nil {
		return err
	}
	if err := validateID("item", e.Item, MaxItemBytes, true, chars, ErrInvalidEvent); err != nil {
		return err
	}
	switch {
	case e.TS == 0:
		return eventErr("ts", "missing (required, unix milliseconds or RFC 3339)")
	case e.TS < 0:
		return eventErr("ts", "must be after 1970-01-01T00:00:00Z, got "+strconv.FormatInt(e.TS, 10))
	case e.TS > MaxTS:
		return eventErr("ts", "must not be after year 9999, got "+strconv.FormatInt(e.TS, 10))
	}
	if e.Kind >= numKinds {
		return eventErr("kind", "unknown kind "+strconv.Itoa(int(e.Kind)))
	}
	return validateID("id", e.ID, MaxIDBytes, false, chars, ErrInvalidEvent)
}

// CheckID checks s as every write checks a session or item id: 1 to max
// bytes, valid UTF-8, no control characters. The error is a *FieldError
// naming field. Reads apply it too, so a query never takes an id the log
// would reject.
func CheckID(field, s string, max int) error {
	return validateID(field, s, max, true, true, ErrInvalidEvent)
}

// validateID checks an identifier: length bounds, valid UTF-8 and no control
// characters. Ids end up in logs, CSV exports and HTTP paths, where a newline
// or a broken byte sequence does damage far from its source, so they are
// refused at the door.
func validateID(field, s string, max int, required, chars bool, sentinel error) error {
	mk := func(reason string) error { return &FieldError{Field: field, Reason: reason, Err: sentinel} }
	if len(s) == 0 {
		if required {
			return mk("missing or empty (required)")
		}
		return nil
	}
	if len(s) > max {
		return mk(strconv.Itoa(len(s)) + " bytes, more than the limit of " + strconv.Itoa(max))
	}
	if !chars {
		return nil
	}
	hi := false
	for i := 0; i < len(s); i++ {
		c := s[i]
		if c < 0x20 || c == 0x7f {
			return mk("contains control character " + strconv.QuoteRune(rune(c)) + " at byte " + strconv.Itoa(i))
		}
		if c >= utf8.RuneSelf {
			hi = true
		}
	}
	if hi && !utf8.ValidString(s) {
		return mk("not valid UTF-8")
	}
	return nil
}

func asciiEqualFold(b []byte, lower string) bool {
	if len(b) != len(lower) {
		return false
	}
	for i := 0; i < len(b); i++ {
		c := b[i]
		if 'A' <= c && c <= 'Z' {
			c += 'a' - 'A'
		}
		if c != lower[i] {
			return false
		}
	}
	return true
}

// truncate shortens s for use inside an error message, on a rune boundary.
func truncate(s string, n int) string {
	if len(s) <= n {
		return s
	}
	for n > 0 && !utf8.RuneStart(s[n]) {
		n--
	}
	return s[:n] + "..."
}
