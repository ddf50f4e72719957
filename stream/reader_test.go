package stream

import (
	"bytes"
	"compress/gzip"
	"errors"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// result is one call of Reader.Next: an event, or the line of a *LineError.
type result struct {
	ev      Event
	errLine int
}

// readAll drains r, recording events and line errors, and fails the test on
// any other error. The cap keeps a broken reader from looping forever.
func readAll(t *testing.T, r Reader) []result {
	t.Helper()
	var out []result
	for range 100000 {
		ev, err := r.Next()
		if errors.Is(err, io.EOF) {
			return out
		}
		var le *LineError
		switch {
		case errors.As(err, &le):
			if le.Line <= 0 || !strings.HasPrefix(le.Error(), "line ") {
				t.Fatalf("bad LineError %+v: %q", le, le.Error())
			}
			out = append(out, result{errLine: le.Line})
		case err != nil:
			t.Fatalf("Next: %v", err)
		default:
			out = append(out, result{ev: ev})
		}
	}
	t.Fatal("reader did not reach EOF")
	return nil
}

func checkResults(t *testing.T, got, want []result) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("got %d results %+v, want %d %+v", len(got), got, len(want), want)
	}
	for i := range want {
		if got[i] != want[i] {
			t.Errorf("result %d: got %+v, want %+v", i, got[i], want[i])
		}
	}
}

// wantJSONL is testdata/events.jsonl: lines 3 and 7 are blank, 4 is not JSON,
// 5 has an empty item.
var wantJSONL = []result{
	{ev: Event{Session: "v1", Item: "garden-spade", TS: 1767225600000}},
	{ev: Event{Session: "v1", Item: "garden-rake", TS: 1767225605000, Kind: KindView}},
	{errLine: 4},
	{errLine: 5},
	{ev: Event{Session: "v2", Item: "seed-tray", TS: 1767225602000, Kind: KindCart, ID: "e-5"}},
	{ev: Event{Session: "v2", Item: "seed-tray", TS: 1767225603000, Kind: KindPurchase}},
}

func gzipFile(t *testing.T, src, dst string) {
	t.Helper()
	data, err := os.ReadFile(src)
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	zw := gzip.NewWriter(&buf)
	zw.Write(data)
	if err := zw.Close(); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(dst, buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
}

func TestJSONLinesReader(t *testing.T) {
	f, err := os.Open("testdata/events.jsonl")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	r := NewJSONLinesReader(f)
	checkResults(t, readAll(t, r), wantJSONL)
	if r.Line() != 8 {
		t.Fatalf("Line() = %d after the last line, want 8", r.Line())
	}
	// EOF is sticky.
	if _, err := r.Next(); !errors.Is(err, io.EOF) {
		t.Fatalf("Next after EOF: %v", err)
	}
}

func TestLineErrorWrapsCause(t *testing.T) {
	r := NewJSONLinesReader(strings.NewReader(`{"session":"s","item":"","ts":5}` + "\n"))
	_, err := r.Next()
	var le *LineError
	var fe *FieldError
	if !errors.As(err, &le) || le.Line != 1 || !errors.Is(err, ErrInvalidEvent) || !errors.As(err, &fe) || fe.Field != "item" {
		t.Fatalf("Next() error = %v; want line 1, ErrInvalidEvent on field item", err)
	}
	if got := err.Error(); got != "line 1: stream: invalid event: item: missing or empty (required)" {
		t.Fatalf("message %q", got)
	}
}

func TestJSONLinesEdges(t *testing.T) {
	good := `{"session":"s","item":"a","ts":5}`
	ev := Event{Session: "s", Item: "a", TS: 5}
	huge := `{"session":"s","item":"a","ts":5,"pad":"` + strings.Repeat("x", MaxLineBytes) + `"}`
	justFits := `{"session":"s","item":"a","ts":5,"pad":"` + strings.Repeat("x", MaxLineBytes-len(`{"session":"s","item":"a","ts":5,"pad":""}`)) + `"}`
	tests := []struct {
		name string
		in   string
		want []result
	}{
		{"no final newline", good + "\n" + good, []result{{ev: ev}, {ev: ev}}},
		{"crlf", good + "\r\n" + good + "\r\n", []result{{ev: ev}, {ev: ev}}},
		{"byte order mark", "\xef\xbb\xbf" + good + "\n", []result{{ev: ev}}},
		{"only blanks", "\n \n\t\n", nil},
		{"empty", "", nil},
		{"line over 1 MiB skipped", huge + "\n" + good + "\n", []result{{errLine: 1}, {ev: ev}}},
		{"line over 1 MiB at the end", good + "\n" + huge, []result{{ev: ev}, {errLine: 2}}},
		{"line of exactly 1 MiB", justFits + "\n" + good, []result{{ev: ev}, {ev: ev}}},
		{"bad lines in a row", "x\ny\n" + good + "\nz", []result{{errLine: 1}, {errLine: 2}, {ev: ev}, {errLine: 4}}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			checkResults(t, readAll(t, NewJSONLinesReader(strings.NewReader(tt.in))), tt.want)
		})
	}
	t.Run("too long is ErrLineTooLong", func(t *testing.T) {
		_, err := NewJSONLinesReader(strings.NewReader(huge)).Next()
		if !errors.Is(err, ErrLineTooLong) {
			t.Fatalf("error %v, want ErrLineTooLong", err)
		}
	})
}

// failingReader returns data, then a read error.
type failingReader struct {
	data []byte
	err  error
}

func (f *failingReader) Read(p []byte) (int, error) {
	if len(f.data) == 0 {
		return 0, f.err
	}
	n := copy(p, f.data)
	f.data = f.data[n:]
	return n, nil
}

func TestReadErrorIsFinal(t *testing.T) {
	boom := errors.New("disk on fire")
	r := NewJSONLinesReader(&failingReader{data: []byte(`{"session":"s","item":"a","ts":5}` + "\n" + `{"sess`), err: boom})
	if _, err := r.Next(); err != nil {
		t.Fatalf("first line: %v", err)
	}
	for range 2 {
		_, err := r.Next()
		var le *LineError
		if !errors.Is(err, boom) || errors.As(err, &le) {
			t.Fatalf("Next() = %v, want the read error, not a line error", err)
		}
	}
}

func TestOpenFile(t *testing.T) {
	dir := t.TempDir()
	// Gzip is recognised by content: this file has no .gz in its name.
	gzipFile(t, "testdata/events.jsonl", filepath.Join(dir, "events.log"))
	gzipFile(t, "testdata/events.csv", filepath.Join(dir, "events.CSV.gz"))
	copyFile(t, "testdata/events.csv", filepath.Join(dir, "plain.csv"))

	wantCSV := []result{
		{ev: Event{Session: "v1", Item: "garden-spade", TS: 1767225600000}},
		{ev: Event{Session: "v1", Item: "garden-rake", TS: 1767225605000}},
		{errLine: 4},
		{ev: Event{Session: "v2", Item: "seed,tray", TS: 1767225602000}},
	}
	tests := []struct {
		file string
		want []result
	}{
		{"testdata/events.jsonl", wantJSONL},
		{filepath.Join(dir, "events.log"), wantJSONL},
		{filepath.Join(dir, "events.CSV.gz"), wantCSV},
		{filepath.Join(dir, "plain.csv"), wantCSV},
	}
	for _, tt := range tests {
		t.Run(filepath.Base(tt.file), func(t *testing.T) {
			fr, err := OpenFile(tt.file)
			if err != nil {
				t.Fatal(err)
			}
			checkResults(t, readAll(t, fr), tt.want)
			if err := fr.Close(); err != nil {
				t.Fatalf("Close: %v", err)
			}
		})
	}
	t.Run("missing file", func(t *testing.T) {
		if _, err := OpenFile(filepath.Join(dir, "nope.jsonl")); !errors.Is(err, os.ErrNotExist) {
			t.Fatalf("error %v, want os.ErrNotExist", err)
		}
	})
	t.Run("bad csv header", func(t *testing.T) {
		p := filepath.Join(dir, "bad.csv")
		os.WriteFile(p, []byte("user,thing\n1,2\n"), 0o644)
		if _, err := OpenFile(p); !errors.Is(err, ErrBadHeader) {
			t.Fatalf("error %v, want ErrBadHeader", err)
		}
	})
	t.Run("truncated gzip is a final error", func(t *testing.T) {
		full, _ := os.ReadFile(filepath.Join(dir, "events.log"))
		p := filepath.Join(dir, "cut.jsonl")
		os.WriteFile(p, full[:len(full)-12], 0o644)
		fr, err := OpenFile(p)
		if err != nil {
			t.Fatal(err)
		}
		defer fr.Close()
		for {
			_, err := fr.Next()
			var le *LineError
			if errors.As(err, &le) || err == nil {
				continue
			}
			if errors.Is(err, io.EOF) {
				t.Fatal("a truncated gzip stream read to a clean EOF")
			}
			if !errors.Is(err, io.ErrUnexpectedEOF) {
				t.Fatalf("error %v, want io.ErrUnexpectedEOF", err)
			}
			break
		}
	})
	t.Run("NewReader picks by name", func(t *testing.T) {
		data, _ := os.ReadFile(filepath.Join(dir, "events.CSV.gz"))
		r, err := NewReader(bytes.NewReader(data), "upload.csv.gz")
		if err != nil {
			t.Fatal(err)
		}
		checkResults(t, readAll(t, r), wantCSV)
	})
}

func copyFile(t *testing.T, src, dst string) {
	t.Helper()
	data, err := os.ReadFile(src)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(dst, data, 0o644); err != nil {
		t.Fatal(err)
	}
}
