package dataset

import (
	"bytes"
	"errors"
	"io"
	"testing"

	"waymark/stream"
)

// drain reads r to its end; every event it yields must be valid and every
// error either a bad record or the end.
func drain(t *testing.T, r stream.Reader) {
	for range 100_000 {
		ev, err := r.Next()
		if errors.Is(err, io.EOF) {
			return
		}
		var le *stream.LineError
		if errors.As(err, &le) {
			continue
		}
		if err != nil {
			return // a read error is final, never a panic
		}
		if verr := ev.Validate(); verr != nil {
			t.Fatalf("reader produced an invalid event %+v: %v", ev, verr)
		}
	}
	t.Fatal("reader did not reach the end")
}

func FuzzMSNBC(f *testing.F) {
	f.Add([]byte(msnbcSample))
	f.Add([]byte("% Sequences:\n1\n"))
	f.Add([]byte("a b\n% Sequences:\n1 2 3\n-1\n2 2 2\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		r, err := NewMSNBCReader(bytes.NewReader(data), MSNBCOptions{})
		if err != nil {
			return
		}
		drain(t, r)
	})
}

func FuzzEshop(f *testing.F) {
	f.Add([]byte(eshopSample))
	f.Add([]byte(eshopSample + "2026;13;1;1;1;1;1;A1;1;1;1;1;1;1\n;;;;\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		r, err := NewEshopReader(bytes.NewReader(data), EshopOptions{})
		if err != nil {
			return
		}
		drain(t, r)
		for _, rec := range r.Items() {
			if err := rec.Validate(); err != nil {
				t.Fatalf("invalid catalogue record %+v: %v", rec, err)
			}
		}
	})
}
