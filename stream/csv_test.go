package stream

import (
	"bytes"
	"compress/gzip"
	"encoding/csv"
	"errors"
	"io"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

func TestCSVReaderSemicolon(t *testing.T) {
	f, err := os.Open("testdata/events_semicolon.csv")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	r, err := NewCSVReader(f)
	if err != nil {
		t.Fatal(err)
	}
	if r.Delimiter() != ';' {
		t.Fatalf("delimiter %q, want ';'", r.Delimiter())
	}
	// Columns in another order and case, an extra "note" column, CRLF, a
	// blank line, a quoted field holding the delimiter and a doubled quote,
	// a short line.
	checkResults(t, readAll(t, r), []result{
		{ev: Event{Session: "v1", Item: "garden-spade", TS: 1767225600000}},
		{ev: Event{Session: "v1", Item: "garden-rake", TS: 1767225605000, Kind: KindView}},
		{ev: Event{Session: "v2", Item: "seed;tray", TS: 1767225602000, Kind: KindCart, ID: "e-5"}},
		{errLine: 6},
		{ev: Event{Session: "v2", Item: "seed-tray", TS: 1767225603000, Kind: KindPurchase}},
	})
}

func TestCSVHeader(t *testing.T) {
	tests := []struct {
		name   string
		in     string
		delim  byte
		bad    bool
		events []result
	}{
		{name: "plain", in: "session,item,ts\ns,a,5\n", delim: ',', events: []result{{ev: Event{Session: "s", Item: "a", TS: 5}}}},
		{name: "bom and spaces in names", in: "\xef\xbb\xbf Session , ITEM,Ts\ns,a,5\n", delim: ',', events: []result{{ev: Event{Session: "s", Item: "a", TS: 5}}}},
		{name: "quoted names", in: "\"session\";\"item\";\"ts\";\"kind\"\ns;a;5;view\n", delim: ';', events: []result{{ev: Event{Session: "s", Item: "a", TS: 5, Kind: KindView}}}},
		{name: "blank lines before header", in: "\n\nts,id,item,session\n5,x,a,s\n", delim: ',', events: []result{{ev: Event{Session: "s", Item: "a", TS: 5, ID: "x"}}}},
		{name: "missing ts", in: "session,item\ns,a\n", bad: true},
		{name: "duplicate column", in: "session,item,ts,item\n", bad: true},
		{name: "empty input", in: "", bad: true},
		{name: "broken quoting", in: "\"session,item,ts\n", bad: true},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			r, err := NewCSVReader(strings.NewReader(tt.in))
			if tt.bad {
				if !errors.Is(err, ErrBadHeader) {
					t.Fatalf("NewCSVReader error %v, want ErrBadHeader", err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if r.Delimiter() != tt.delim {
				t.Fatalf("delimiter %q, want %q", r.Delimiter(), tt.delim)
			}
			checkResults(t, readAll(t, r), tt.events)
		})
	}
}

func TestCSVLines(t *testing.T) {
	const header = "session,item,ts,kind,id\n"
	tests := []struct {
		name  string
		line  string
		want  Event
		field string // "" with bad=true: the record as a whole
		bad   bool
	}{
		{name: "ok", line: "s,a,1767225600000,,", want: Event{Session: "s", Item: "a", TS: 1767225600000}},
		{name: "rfc3339", line: "s,a,2026-01-01T00:00:00Z,purchase,e1", want: Event{Session: "s", Item: "a", TS: 1767225600000, Kind: KindPurchase, ID: "e1"}},
		{name: "quoted empty", line: `s,a,5,"",""`, want: Event{Session: "s", Item: "a", TS: 5}},
		{name: "quoted with quote", line: `"s ""1""",a,5,,`, want: Event{Session: `s "1"`, Item: "a", TS: 5}},
		{name: "spaces kept as data", line: " s,a,5,,", want: Event{Session: " s", Item: "a", TS: 5}},
		{name: "too few fields", line: "s,a,5", bad: true},
		{name: "too many fields", line: "s,a,5,,,x", bad: true},
		{name: "bare quote", line: `s,a"b,5,,`, bad: true},
		{name: "text after closing quote", line: `"s"x,a,5,,`, bad: true},
		{name: "unclosed quote", line: `"s,a,5,,`, bad: true},
		{name: "empty session", line: ",a,5,,", bad: true, field: "session"},
		{name: "bad ts", line: "s,a,noon,,", bad: true, field: "ts"},
		{name: "missing ts", line: "s,a,,,", bad: true, field: "ts"},
		{name: "bad kind", line: "s,a,5,like,", bad: true, field: "kind"},
		{name: "long id", line: "s,a,5,," + strings.Repeat("i", MaxIDBytes+1), bad: true, field: "id"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			r, err := NewCSVReader(strings.NewReader(header + tt.line + "\n"))
			if err != nil {
				t.Fatal(err)
			}
			got, err := r.Next()
			if tt.bad {
				var le *LineError
				var fe *FieldError
				if !errors.As(err, &le) || le.Line != 2 || !errors.Is(err, ErrInvalidEvent) || !errors.As(err, &fe) {
					t.Fatalf("Next() = %+v, %v; want a line-2 error wrapping ErrInvalidEvent", got, err)
				}
				if fe.Field != tt.field {
					t.Fatalf("error %q names field %q, want %q", err, fe.Field, tt.field)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if got != tt.want {
				t.Fatalf("got %+v, want %+v", got, tt.want)
			}
		})
	}
}

// TestCSVSplitMatchesEncodingCSV reads every line of the UCI "Clickstream data
// for online shopping" file (../shared/data/eshop-clothing-2008, cited in
// ../shared/data/README.md: M. Łapczyński, S. Białowąs, Studia Ekonomiczne
// 151 (2013); UCI Machine Learning Repository, CC BY 4.0) with the CSV field
// splitter and with Go's encoding/csv, and checks that they agree field by
// field and that the row and session counts are the ones the data README
// states (165,474 clicks, 24,026 sessions).
func TestCSVSplitMatchesEncodingCSV(t *testing.T) {
	// The project root is the parent of this package; the shared data sits
	// beside the project.
	path := filepath.Join("..", "..", "shared", "data", "eshop-clothing-2008", "eshop-clothing-2008.csv.gz")
	f, err := os.Open(path)
	if errors.Is(err, os.ErrNotExist) {
		t.Skipf("dataset not present at %s", path)
	}
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	zr, err := gzip.NewReader(f)
	if err != nil {
		t.Fatal(err)
	}
	data, err := io.ReadAll(zr)
	if err != nil {
		t.Fatal(err)
	}
	// One encoding/csv reader over the whole file, in step with the splitter
	// applied line by line.
	ref := csv.NewReader(bytes.NewReader(data))
	ref.Comma = ';'
	c := &CSVReader{delim: ';'}
	rows := 0
	sessions := map[string]struct{}{}
	sessionCol := -1
	lines := bytes.Split(bytes.TrimSuffix(data, []byte("\n")), []byte("\n"))
	for i, text := range lines {
		line := i + 1
		text = bytes.TrimSuffix(text, []byte("\r"))
		if line == 1 && detectDelimiter(text) != ';' {
			t.Fatalf("header %q: delimiter not detected as ';'", text)
		}
		got, err := c.split(text)
		if err != nil {
			t.Fatalf("line %d: split: %v", line, err)
		}
		want, err := ref.Read()
		if err != nil {
			t.Fatalf("line %d: encoding/csv: %v", line, err)
		}
		if !equalFields(got, want) {
			t.Fatalf("line %d: split %q, encoding/csv %q", line, got, want)
		}
		if line == 1 {
			for i, name := range want {
				if name == "session ID" {
					sessionCol = i
				}
			}
			continue
		}
		rows++
		sessions[want[sessionCol]] = struct{}{}
	}
	if _, err := ref.Read(); err != io.EOF {
		t.Fatalf("encoding/csv has records after the last line: %v", err)
	}
	if rows != 165474 || len(sessions) != 24026 {
		t.Fatalf("read %d rows and %d sessions, the data README states 165,474 and 24,026", rows, len(sessions))
	}
}

func equalFields(got [][]byte, want []string) bool {
	g := make([]string, len(got))
	for i, f := range got {
		g[i] = string(f)
	}
	return reflect.DeepEqual(g, want)
}
