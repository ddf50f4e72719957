package stream

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"errors"
	"io"
	"reflect"
	"testing"
)

// The seed corpora live in testdata/fuzz/<target>/ and run with every plain
// `go test`; `go test -fuzz FuzzDecodeJSON ./stream` explores further.

// FuzzDecodeJSON checks that DecodeJSON never panics, that every error is a
// *FieldError wrapping ErrInvalidEvent, that an accepted event round-trips
// through AppendJSON, and, differentially, that whenever the hand-written
// fast path accepts an input, decoding with encoding/json gives the same
// event.
func FuzzDecodeJSON(f *testing.F) {
	f.Fuzz(func(t *testing.T, data []byte) {
		fast, fastOK := decodeFast(data)
		slow, slowErr := decodeSlow(data)
		if fastOK {
			if slowErr != nil {
				t.Fatalf("fast path accepted %q, encoding/json path failed: %v", data, slowErr)
			}
			if fast != slow {
				t.Fatalf("paths disagree on %q:\nfast %+v\nslow %+v", data, fast, slow)
			}
		}
		ev, err := DecodeJSON(data)
		// DecodeJSON must be exactly "decode by either path, then validate".
		chosen, chosenErr := slow, slowErr
		if fastOK {
			chosen, chosenErr = fast, nil
		}
		if chosenErr == nil {
			chosenErr = chosen.Validate()
		}
		if (err == nil) != (chosenErr == nil) {
			t.Fatalf("DecodeJSON(%q) error %v, but decode+validate gives %v", data, err, chosenErr)
		}
		if err != nil {
			var fe *FieldError
			if !errors.Is(err, ErrInvalidEvent) || !errors.As(err, &fe) {
				t.Fatalf("DecodeJSON(%q) error %v is not a field error wrapping ErrInvalidEvent", data, err)
			}
			return
		}
		if ev != chosen {
			t.Fatalf("DecodeJSON(%q) = %+v, decode gives %+v", data, ev, chosen)
		}
		if err := ev.Validate(); err != nil {
			t.Fatalf("accepted event fails Validate: %v", err)
		}
		out := ev.AppendJSON(nil)
		if !json.Valid(out) {
			t.Fatalf("AppendJSON(%+v) = %q is not valid JSON", ev, out)
		}
		back, err := DecodeJSON(out)
		if err != nil {
			t.Fatalf("canonical form %q does not decode: %v", out, err)
		}
		if back != ev {
			t.Fatalf("round trip of %q: %+v != %+v", out, back, ev)
		}
	})
}

// FuzzDecodeCSV checks that the CSV reader never panics, returns only
// *LineError or header errors, yields only valid events, and that its field
// splitter agrees with encoding/csv on every single-line record.
func FuzzDecodeCSV(f *testing.F) {
	f.Fuzz(func(t *testing.T, data []byte) {
		r, err := NewCSVReader(bytes.NewReader(data))
		if err != nil {
			if !errors.Is(err, ErrBadHeader) {
				t.Fatalf("NewCSVReader error %v does not wrap ErrBadHeader", err)
			}
		} else {
			for range 10000 {
				ev, err := r.Next()
				if errors.Is(err, io.EOF) {
					break
				}
				var le *LineError
				if errors.As(err, &le) {
					if le.Line < 2 {
						t.Fatalf("line error on line %d, before the first record", le.Line)
					}
					continue
				}
				if err != nil {
					t.Fatalf("Next: %v (not a line error)", err)
				}
				if err := ev.Validate(); err != nil {
					t.Fatalf("CSV gave an invalid event %+v: %v", ev, err)
				}
				back, err := DecodeJSON(ev.AppendJSON(nil))
				if err != nil || back != ev {
					t.Fatalf("CSV event %+v does not round-trip through JSON: %+v, %v", ev, back, err)
				}
			}
		}
		for _, delim := range []byte{',', ';'} {
			c := &CSVReader{delim: delim}
			for _, line := range bytes.Split(data, []byte{'\n'}) {
				if len(line) == 0 || bytes.IndexByte(line, '\r') >= 0 {
					continue // encoding/csv skips empty lines and rewrites \r
				}
				got, gotErr := c.split(line)
				ref := csv.NewReader(bytes.NewReader(line))
				ref.Comma = rune(delim)
				ref.FieldsPerRecord = -1
				want, wantErr := ref.Read()
				if (gotErr == nil) != (wantErr == nil) {
					t.Fatalf("line %q delim %q: split error %v, encoding/csv error %v", line, delim, gotErr, wantErr)
				}
				if gotErr == nil && !equalFields(got, want) {
					t.Fatalf("line %q delim %q: split %q, encoding/csv %q", line, delim, got, want)
				}
			}
		}
	})
}

// FuzzDecodeItemJSON checks that catalogue decoding never panics and that an
// accepted record round-trips through its canonical form.
func FuzzDecodeItemJSON(f *testing.F) {
	f.Fuzz(func(t *testing.T, data []byte) {
		r, err := DecodeItemJSON(data)
		if err != nil {
			if !errors.Is(err, ErrInvalidItem) {
				t.Fatalf("error %v does not wrap ErrInvalidItem", err)
			}
			return
		}
		out := r.AppendJSON(nil)
		if !json.Valid(out) {
			t.Fatalf("AppendJSON = %q is not valid JSON", out)
		}
		back, err := DecodeItemJSON(out)
		if err != nil {
			t.Fatalf("canonical form %q does not decode: %v", out, err)
		}
		if !reflect.DeepEqual(back, r) {
			t.Fatalf("round trip of %q:\n%+v\n%+v", out, back, r)
		}
	})
}
