package dataset

import (
	"compress/gzip"
	"errors"
	"io"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
	"time"

	"waymark/stream"
)

// readAll drains r, returning the events and the bad records.
func readAll(t *testing.T, r stream.Reader) (evs []stream.Event, bad []error) {
	t.Helper()
	for {
		ev, err := r.Next()
		if errors.Is(err, io.EOF) {
			return evs, bad
		}
		var le *stream.LineError
		if errors.As(err, &le) {
			bad = append(bad, err)
			continue
		}
		if err != nil {
			t.Fatalf("final error: %v", err)
		}
		evs = append(evs, ev)
	}
}

// An invented site with four page categories, in the MSNBC file layout.
const msnbcSample = "% Different categories found in input file:\r\n\r\n" +
	"home sport weather shop\r\n\r\n\r\n% Sequences:\r\n\r\n" +
	"1 1 \r\n2 \r\n3 2 2 4\r\n1 9\r\n\r\n4 3\r\n"

func TestMSNBCReader(t *testing.T) {
	start := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	r, err := NewMSNBCReader(strings.NewReader(msnbcSample), MSNBCOptions{Start: start, Step: time.Second, SessionPrefix: "v"})
	if err != nil {
		t.Fatal(err)
	}
	if got := r.Categories(); !reflect.DeepEqual(got, []string{"home", "sport", "weather", "shop"}) {
		t.Fatalf("categories %v", got)
	}
	evs, bad := readAll(t, r)
	type click struct {
		s, i string
		sec  int64
	}
	var got []click
	for _, e := range evs {
		got = append(got, click{e.Session, e.Item, (e.TS - start.UnixMilli()) / 1000})
	}
	// "1 9" names a category the header does not have: the line is one bad
	// record and the sessions after it keep counting from the good ones.
	want := []click{
		{"v1", "home", 0}, {"v1", "home", 1},
		{"v2", "sport", 2},
		{"v3", "weather", 3}, {"v3", "sport", 4}, {"v3", "sport", 5}, {"v3", "shop", 6},
		{"v4", "shop", 7}, {"v4", "weather", 8},
	}
	if !reflect.DeepEqual(got, want) {
		t.Errorf("clicks\n got %v\nwant %v", got, want)
	}
	if len(bad) != 1 || !errors.Is(bad[0], ErrBadRecord) || !strings.Contains(bad[0].Error(), "line 11") {
		t.Errorf("bad records %v, want one on line 11", bad)
	}
	if r.Sessions() != 4 {
		t.Errorf("sessions %d, want 4", r.Sessions())
	}
}

func TestMSNBCMaxSessions(t *testing.T) {
	r, err := NewMSNBCReader(strings.NewReader(msnbcSample), MSNBCOptions{MaxSessions: 2})
	if err != nil {
		t.Fatal(err)
	}
	evs, _ := readAll(t, r)
	if len(evs) != 3 || evs[2].Session != "msnbc-2" {
		t.Errorf("got %d events (%v), want the 3 clicks of the first 2 sessions", len(evs), evs)
	}
	// Default times: 1999-09-28, 10 ms apart, strictly increasing.
	if evs[0].TS != time.Date(1999, 9, 28, 0, 0, 0, 0, time.UTC).UnixMilli() || evs[1].TS-evs[0].TS != 10 {
		t.Errorf("times %d, %d", evs[0].TS, evs[1].TS)
	}
}

func TestMSNBCBadHeader(t *testing.T) {
	tests := []struct{ name, in string }{
		{"empty", ""},
		{"no marker", "home sport\n1 2\n"},
		{"no names", "% Sequences:\n1 2\n"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if _, err := NewMSNBCReader(strings.NewReader(tt.in), MSNBCOptions{}); !errors.Is(err, ErrBadHeader) {
				t.Errorf("err %v, want ErrBadHeader", err)
			}
		})
	}
	if _, err := NewMSNBCReader(strings.NewReader(msnbcSample), MSNBCOptions{Step: time.Microsecond}); !errors.Is(err, ErrBadOption) {
		t.Errorf("sub-millisecond step: err %v, want ErrBadOption", err)
	}
}

// An invented shop in the e-shop file layout: two days, three sessions.
const eshopSample = "year;month;day;order(sells);country;session ID;page 1 (main category);page 2 (clothing model);colour;location;model photography;price;price 2;page\n" +
	"2026;1;5;1;29;7;1;A3;1;5;1;28;2;1\n" +
	"2026;1;5;2;29;7;4;A3;1;5;1;28;2;1\n" +
	"2026;1;5;1;9;8;3;C1;14;2;2;57;1;4\n" +
	"2026;1;5;3;29;7;2;B2;3;1;1;30;1;2\n" +
	"2026;1;5;2;9;8;3;C1;14;2;2;57;1;4\n" +
	"2026;1;6;1;12;9;1;A3;1;5;1;28;2;1\n" +
	"2026;2;30;1;12;10;1;A3;1;5;1;28;2;1\n" +
	"2026;1;6;2;12;9;2;Z9;15;1;1;30;1;2\n" +
	"2026;1;6;1;12;9;2;B2;3;1;1;30;1;2\n"

func TestEshopReader(t *testing.T) {
	r, err := NewEshopReader(strings.NewReader(eshopSample), EshopOptions{})
	if err != nil {
		t.Fatal(err)
	}
	var evs []stream.Event
	var bad []error
	var items [][]stream.ItemRecord
	for {
		ev, err := r.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			bad = append(bad, err)
			continue
		}
		evs = append(evs, ev)
		items = append(items, r.TakeItems())
	}
	day5 := time.Date(2026, 1, 5, 0, 0, 0, 0, time.UTC).UnixMilli()
	day6 := time.Date(2026, 1, 6, 0, 0, 0, 0, time.UTC).UnixMilli()
	type click struct {
		s, i string
		ts   int64
	}
	var got []click
	for _, e := range evs {
		got = append(got, click{e.Session, e.Item, e.TS})
	}
	want := []click{
		{"7", "A3", day5 + 1000}, {"7", "A3", day5 + 2000}, {"8", "C1", day5 + 3000},
		{"7", "B2", day5 + 4000}, {"8", "C1", day5 + 5000}, {"9", "A3", day6 + 1000},
	}
	if !reflect.DeepEqual(got, want) {
		t.Errorf("clicks\n got %v\nwant %v", got, want)
	}
	// Bad rows: 30 February, colour 15, and an order that goes back.
	if len(bad) != 3 {
		t.Fatalf("bad rows %v, want 3", bad)
	}
	for i, frag := range []string{"no such date", "colour", "order 1 after order 1"} {
		if !errors.Is(bad[i], ErrBadRecord) || !strings.Contains(bad[i].Error(), frag) {
			t.Errorf("bad row %d: %v, want %q", i, bad[i], frag)
		}
	}
	// A3 is introduced by the first row and extended by the second (the
	// sale category); the repeats of C1 add nothing.
	if len(items[0]) != 1 || len(items[1]) != 1 || len(items[4]) != 0 {
		t.Errorf("catalogue records per row: %d %d %d, want 1 1 0", len(items[0]), len(items[1]), len(items[4]))
	}
	all := r.Items()
	if len(all) != 3 || all[0].Item != "A3" || all[2].Item != "C1" {
		t.Fatalf("items %v", all)
	}
	wantA3 := map[string][]string{
		"category": {"sale", "trousers"}, "colour": {"beige"}, "location": {"5"}, "photography": {"en face"},
		"price": {"28"}, "price_above_average": {"no"}, "page": {"1"}, "group": {"A"},
	}
	if !reflect.DeepEqual(all[0].Attrs, wantA3) {
		t.Errorf("A3 attrs %v\nwant %v", all[0].Attrs, wantA3)
	}
	for _, rec := range all {
		if err := rec.Validate(); err != nil {
			t.Errorf("record %s does not validate: %v", rec.Item, err)
		}
	}
}

func TestEshopBadHeader(t *testing.T) {
	for _, in := range []string{"", "year;month\n", strings.Replace(eshopSample, "colour", "color", 1)} {
		if _, err := NewEshopReader(strings.NewReader(in), EshopOptions{}); !errors.Is(err, ErrBadHeader) {
			t.Errorf("header %.40q: err %v, want ErrBadHeader", in, err)
		}
	}
}

func writeGzip(t *testing.T, path, body string) {
	t.Helper()
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	zw := gzip.NewWriter(f)
	if _, err := zw.Write([]byte(body)); err != nil {
		t.Fatal(err)
	}
	if err := zw.Close(); err != nil {
		t.Fatal(err)
	}
	if err := f.Close(); err != nil {
		t.Fatal(err)
	}
}

func TestOpenDetectsFormat(t *testing.T) {
	dir := t.TempDir()
	files := map[string]string{
		"a.seq.gz":   msnbcSample,
		"shop.gz":    eshopSample,
		"ev.jsonl":   `{"session":"s","item":"x","ts":1767225600000}` + "\n",
		"ev.csv.gz":  "session,item,ts\ns,x,1767225600000\n",
		"plain.data": msnbcSample,
	}
	want := map[string]string{"a.seq.gz": FormatMSNBC, "shop.gz": FormatEshop, "ev.jsonl": FormatEvents, "ev.csv.gz": FormatEvents, "plain.data": FormatMSNBC}
	for name, body := range files {
		p := filepath.Join(dir, name)
		if strings.HasSuffix(name, ".gz") {
			writeGzip(t, p, body)
		} else if err := os.WriteFile(p, []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	for name := range files {
		t.Run(name, func(t *testing.T) {
			f, err := Open(filepath.Join(dir, name), FormatAuto)
			if err != nil {
				t.Fatal(err)
			}
			defer f.Close()
			if f.Format() != want[name] {
				t.Errorf("format %s, want %s", f.Format(), want[name])
			}
			evs, _ := readAll(t, f)
			if len(evs) == 0 {
				t.Error("no events")
			}
		})
	}
	if _, err := Open(filepath.Join(dir, "ev.jsonl"), "parquet"); !errors.Is(err, ErrUnknownFormat) {
		t.Errorf("unknown format: err %v", err)
	}
	if _, err := Open(filepath.Join(dir, "ev.jsonl"), FormatMSNBC); !errors.Is(err, ErrBadHeader) {
		t.Errorf("events file read as msnbc: err %v, want ErrBadHeader", err)
	}
	if _, err := Open(filepath.Join(dir, "missing"), FormatAuto); err == nil {
		t.Error("missing file opened")
	}
}

// TestOpenForcedEventFormats checks that "csv" and "ndjson" read the
// project's event formats from files whose names say nothing (standard
// input saved as clicks.txt, an export called data.log), where "events"
// decides by the name and reads JSON lines.
func TestOpenForcedEventFormats(t *testing.T) {
	dir := t.TempDir()
	cases := []struct {
		name, format, body string
	}{
		{"clicks.txt", FormatCSV, "session,item,ts\ns,x,1767225600000\ns,y,1767225601000\n"},
		{"export.log", FormatNDJSON, `{"session":"s","item":"x","ts":1767225600000}` + "\n" + `{"session":"s","item":"y","ts":1767225601000}` + "\n"},
		{"gz.bin", FormatCSV, "session,item,ts\ns,x,1767225600000\ns,y,1767225601000\n"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			p := filepath.Join(dir, c.name)
			if c.name == "gz.bin" {
				writeGzip(t, p, c.body)
			} else if err := os.WriteFile(p, []byte(c.body), 0o644); err != nil {
				t.Fatal(err)
			}
			f, err := Open(p, c.format)
			if err != nil {
				t.Fatal(err)
			}
			defer f.Close()
			if f.Format() != c.format {
				t.Errorf("format %s, want %s", f.Format(), c.format)
			}
			evs, bad := readAll(t, f)
			if len(evs) != 2 || len(bad) != 0 {
				t.Errorf("%d events, bad %v; want 2 and none", len(evs), bad)
			}
		})
	}
}

// sharedData returns the path of an open dataset file beside the project
// (../shared/data from the project root), or skips the test.
func sharedData(t *testing.T, rel string) string {
	t.Helper()
	p := filepath.Join("..", "..", "..", "shared", "data", rel)
	if _, err := os.Stat(p); err != nil {
		t.Skipf("open dataset %s not found (../shared/data is absent): %v", rel, err)
	}
	return p
}

// TestEshopDataset reads the e-shop clothing clickstream (Łapczyński and
// Białowąs, Studia Ekonomiczne 151 (2013); UCI Machine Learning Repository,
// CC BY 4.0) and checks the counts given in ../shared/data/README.md.
func TestEshopDataset(t *testing.T) {
	f, err := Open(sharedData(t, "eshop-clothing-2008/eshop-clothing-2008.csv.gz"), FormatAuto)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if f.Format() != FormatEshop {
		t.Fatalf("detected %s", f.Format())
	}
	evs, bad := readAll(t, f)
	sessions, items := map[string]bool{}, map[string]bool{}
	for _, e := range evs {
		sessions[e.Session], items[e.Item] = true, true
	}
	first, last := time.UnixMilli(evs[0].TS).UTC(), time.UnixMilli(evs[len(evs)-1].TS).UTC()
	if len(evs) != 165474 || len(bad) != 0 || len(sessions) != 24026 || len(items) != 217 {
		t.Errorf("%d clicks, %d bad, %d sessions, %d items; want 165474, 0, 24026, 217", len(evs), len(bad), len(sessions), len(items))
	}
	if first.Format(time.DateOnly) != "2008-04-01" || last.Format(time.DateOnly) != "2008-08-13" {
		t.Errorf("dates %s to %s, want 2008-04-01 to 2008-08-13", first, last)
	}
	recs := f.Reader.(*EshopReader).Items()
	if len(recs) != 217 {
		t.Errorf("%d catalogue records, want one per item (217)", len(recs))
	}
}
