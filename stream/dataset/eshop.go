package dataset

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"io"
	"slices"
	"strconv"
	"strings"
	"time"

	"waymark/stream"
)

// EshopOptions configures [NewEshopReader].
type EshopOptions struct {
	// Step separates consecutive rows of one day (default 1 s). The busiest
	// day of the file has 3,456 rows, so a day's clicks fit in its first
	// hour and no session comes near the 30-minute inactivity timeout.
	Step time.Duration
	// SessionPrefix goes before the file's session id (default none).
	SessionPrefix string
}

// DefaultEshopOptions returns the defaults documented on EshopOptions.
func DefaultEshopOptions() EshopOptions { return EshopOptions{Step: time.Second} }

func (o *EshopOptions) validate() error {
	if o.Step == 0 {
		o.Step = DefaultEshopOptions().Step
	}
	if o.Step < time.Millisecond {
		return fmt.Errorf("%w: Step %s below 1ms (event times have millisecond resolution)", ErrBadOption, o.Step)
	}
	return nil
}

// The columns of the file, by the header's names.
const (
	ecYear = iota
	ecMonth
	ecDay
	ecOrder
	ecCountry
	ecSession
	ecCategory
	ecModel
	ecColour
	ecLocation
	ecPhoto
	ecPrice
	ecPrice2
	ecPage
	ecCount
)

var eshopHeader = [ecCount]string{
	"year", "month", "day", "order(sells)", "country", "session ID", "page 1 (main category)",
	"page 2 (clothing model)", "colour", "location", "model photography", "price", "price 2", "page",
}

// Value names from the dataset's description.
var (
	eshopCategories = []string{"trousers", "skirts", "blouses", "sale"}
	eshopColours    = []string{"beige", "black", "blue", "brown", "burgundy", "gray", "green",
		"navy blue", "of many colors", "olive", "pink", "red", "violet", "white"}
	eshopPhoto  = []string{"en face", "profile"}
	eshopYesNo  = []string{"yes", "no"}
	eshopPageNo = 5
	eshopLocNo  = 6
)

// EshopReader reads the e-shop clothing clickstream; see the package doc.
type EshopReader struct {
	opts    EshopOptions
	sc      *bufio.Scanner
	line    int
	step    int64
	perDay  map[int64]int64 // rows seen per day (midnight, unix ms)
	lastOrd map[string]int  // last order(sells) per session
	items   map[string]*stream.ItemRecord
	seen    map[string][ecCount]int // the item's last row, to skip unchanged rows cheaply
	pending []stream.ItemRecord
	fields  [][]byte
	err     error
}

// NewEshopReader checks the header of the e-shop clothing CSV (uncompressed;
// Open unwraps gzip) and returns a reader of its clicks.
func NewEshopReader(r io.Reader, opts EshopOptions) (*EshopReader, error) {
	if err := opts.validate(); err != nil {
		return nil, err
	}
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 0, 64<<10), stream.MaxLineBytes)
	e := &EshopReader{
		opts: opts, sc: sc, step: opts.Step.Milliseconds(),
		perDay: map[int64]int64{}, lastOrd: map[string]int{}, items: map[string]*stream.ItemRecord{}, seen: map[string][ecCount]int{},
	}
	line, ok := e.scan()
	if !ok {
		if e.err != nil && !errors.Is(e.err, io.EOF) {
			return nil, fmt.Errorf("eshop header: %w", e.err)
		}
		return nil, fmt.Errorf("%w: eshop: empty input", ErrBadHeader)
	}
	line = bytes.TrimPrefix(line, []byte("\xef\xbb\xbf"))
	got := strings.Split(string(line), ";")
	if len(got) != ecCount {
		return nil, fmt.Errorf("%w: eshop: %d columns, want %d (%s)", ErrBadHeader, len(got), ecCount, strings.Join(eshopHeader[:], ";"))
	}
	for i, name := range got {
		if strings.TrimSpace(name) != eshopHeader[i] {
			return nil, fmt.Errorf("%w: eshop: column %d is %q, want %q", ErrBadHeader, i+1, truncate(name, 40), eshopHeader[i])
		}
	}
	return e, nil
}

func (e *EshopReader) scan() ([]byte, bool) {
	if !e.sc.Scan() {
		if err := e.sc.Err(); err != nil {
			e.err = fmt.Errorf("read line %d: %w", e.line+1, err)
		} else {
			e.err = io.EOF
		}
		return nil, false
	}
	e.line++
	return bytes.TrimRight(e.sc.Bytes(), "\r"), true
}

// Line returns the number of the line last read (1-based, header included).
func (e *EshopReader) Line() int { return e.line }

// Next returns the next click (see the package doc).
func (e *EshopReader) Next() (stream.Event, error) {
	for {
		if e.err != nil {
			return stream.Event{}, e.err
		}
		line, ok := e.scan()
		if !ok {
			return stream.Event{}, e.err
		}
		if len(bytes.TrimSpace(line)) == 0 {
			continue
		}
		ev, err := e.decode(line)
		if err != nil {
			return stream.Event{}, &stream.LineError{Line: e.line, Err: err}
		}
		return ev, nil
	}
}

func badRow(format string, args ...any) error {
	return fmt.Errorf("%w: eshop: %s", ErrBadRecord, fmt.Sprintf(format, args...))
}

func (e *EshopReader) decode(line []byte) (stream.Event, error) {
	e.fields = e.fields[:0]
	for f := range bytes.SplitSeq(line, []byte{';'}) {
		e.fields = append(e.fields, bytes.TrimSpace(f))
	}
	if len(e.fields) != ecCount {
		return stream.Event{}, badRow("%d fields, want %d", len(e.fields), ecCount)
	}
	num := func(col, lo, hi int) (int, error) {
		n, err := strconv.Atoi(string(e.fields[col]))
		if err != nil || n < lo || n > hi {
			return 0, badRow("%s %q is not a number in %d..%d", eshopHeader[col], truncate(string(e.fields[col]), 20), lo, hi)
		}
		return n, nil
	}
	var v [ecCount]int
	bounds := [ecCount][2]int{
		ecYear: {1970, 9999}, ecMonth: {1, 12}, ecDay: {1, 31}, ecOrder: {1, 1 << 30}, ecCountry: {1, 1 << 30},
		ecCategory: {1, len(eshopCategories)}, ecColour: {1, len(eshopColours)}, ecLocation: {1, eshopLocNo},
		ecPhoto: {1, len(eshopPhoto)}, ecPrice: {0, 1 << 30}, ecPrice2: {1, len(eshopYesNo)}, ecPage: {1, eshopPageNo},
	}
	for col := range ecCount {
		if col == ecSession || col == ecModel {
			continue
		}
		n, err := num(col, bounds[col][0], bounds[col][1])
		if err != nil {
			return stream.Event{}, err
		}
		v[col] = n
	}
	day := time.Date(v[ecYear], time.Month(v[ecMonth]), v[ecDay], 0, 0, 0, 0, time.UTC)
	if day.Day() != v[ecDay] {
		return stream.Event{}, badRow("no such date %d-%02d-%02d", v[ecYear], v[ecMonth], v[ecDay])
	}
	session := e.opts.SessionPrefix + string(e.fields[ecSession])
	item := string(e.fields[ecModel])
	midnight := day.UnixMilli()
	row := e.perDay[midnight] + 1
	ev := stream.Event{Session: session, Item: item, TS: midnight + row*e.step}
	if err := ev.Validate(); err != nil {
		return stream.Event{}, err
	}
	if ev.TS >= midnight+24*time.Hour.Milliseconds() {
		return stream.Event{}, badRow("day %s has more rows than fit in a day %s apart", day.Format(time.DateOnly), e.opts.Step)
	}
	if last, ok := e.lastOrd[session]; ok && v[ecOrder] <= last {
		return stream.Event{}, badRow("session %q: order %d after order %d", truncate(session, 40), v[ecOrder], last)
	}
	e.lastOrd[session] = v[ecOrder]
	e.perDay[midnight] = row
	e.noteItem(item, &v)
	return ev, nil
}

// noteItem records the item's attributes and queues a catalogue record when
// the item is new or shows a value it had not shown before (a model can
// appear under its own category and under "sale").
func (e *EshopReader) noteItem(item string, v *[ecCount]int) {
	key := *v
	for _, c := range []int{ecYear, ecMonth, ecDay, ecOrder, ecCountry} {
		key[c] = 0 // not item attributes
	}
	if last, ok := e.seen[item]; ok && last == key {
		return
	}
	e.seen[item] = key
	attrs := map[string]string{
		"category":            eshopCategories[v[ecCategory]-1],
		"colour":              eshopColours[v[ecColour]-1],
		"location":            strconv.Itoa(v[ecLocation]),
		"photography":         eshopPhoto[v[ecPhoto]-1],
		"price":               strconv.Itoa(v[ecPrice]),
		"price_above_average": eshopYesNo[v[ecPrice2]-1],
		"page":                strconv.Itoa(v[ecPage]),
		"group":               item[:1], // the model code's letter names its main category
	}
	rec := e.items[item]
	changed := false
	if rec == nil {
		rec = &stream.ItemRecord{Item: item, Attrs: map[string][]string{}}
		e.items[item] = rec
		changed = true
	}
	for k, val := range attrs {
		vals := rec.Attrs[k]
		if slices.Contains(vals, val) {
			continue
		}
		vals = append(vals, val)
		slices.Sort(vals)
		rec.Attrs[k] = vals
		changed = true
	}
	if changed {
		e.pending = append(e.pending, cloneRecord(rec))
	}
}

func cloneRecord(r *stream.ItemRecord) stream.ItemRecord {
	c := *r
	c.Attrs = make(map[string][]string, len(r.Attrs))
	for k, v := range r.Attrs {
		c.Attrs[k] = slices.Clone(v)
	}
	return c
}

// TakeItems returns the catalogue records queued since the last call: a
// record for each item the rows returned so far introduced or extended. The
// records of the event Next returned last are included, so applying them
// before that event gives a learner an item's attributes by its first click.
func (e *EshopReader) TakeItems() []stream.ItemRecord {
	out := e.pending
	e.pending = nil
	return out
}

// Items returns the latest record of every item seen so far, by item.
func (e *EshopReader) Items() []stream.ItemRecord {
	out := make([]stream.ItemRecord, 0, len(e.items))
	for _, r := range e.items {
		out = append(out, cloneRecord(r))
	}
	slices.SortFunc(out, func(a, b stream.ItemRecord) int { return strings.Compare(a.Item, b.Item) })
	return out
}
