package stream

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"strconv"
	"strings"
)

// CSVReader reads events from CSV with a header line.
//
// The header names the columns session, item and ts, optionally kind and id,
// in any order and any case; other columns are ignored. The delimiter is ','
// or ';', whichever the header line uses. Fields follow RFC 4180 quoting
// (a quoted field may contain the delimiter and "" for a quote), with one
// restriction: a record is one line, since no valid event contains a line
// break. Each line must have as many fields as the header.
type CSVReader struct {
	lr      *lineReader
	delim   byte
	nfields int
	col     [5]int // index of session, item, ts, kind, id; -1 if absent
	fields  [][]byte
	scratch []byte
}

const (
	colSession = iota
	colItem
	colTS
	colKind
	colID
)

var csvColumnNames = [...]string{"session", "item", "ts", "kind", "id"}

// NewCSVReader reads and checks the header. Errors wrap ErrBadHeader.
func NewCSVReader(r io.Reader) (*CSVReader, error) {
	c := &CSVReader{lr: newLineReader(r)}
	line, err := c.lr.next()
	if err != nil {
		if errors.Is(err, io.EOF) {
			return nil, fmt.Errorf("%w: empty input, expected a header naming session,item,ts", ErrBadHeader)
		}
		return nil, fmt.Errorf("%w: %w", ErrBadHeader, err)
	}
	c.delim = detectDelimiter(line)
	names, err := c.split(line)
	if err != nil {
		return nil, fmt.Errorf("%w: line %d: %w", ErrBadHeader, c.lr.line, err)
	}
	c.col = [5]int{-1, -1, -1, -1, -1}
	for i, raw := range names {
		name := strings.ToLower(strings.TrimSpace(string(raw)))
		for j, want := range csvColumnNames {
			if name != want {
				continue
			}
			if c.col[j] >= 0 {
				return nil, fmt.Errorf("%w: column %q appears twice", ErrBadHeader, want)
			}
			c.col[j] = i
		}
	}
	var missing []string
	for j := colSession; j <= colTS; j++ {
		if c.col[j] < 0 {
			missing = append(missing, csvColumnNames[j])
		}
	}
	if len(missing) > 0 {
		return nil, fmt.Errorf("%w: missing column(s) %s (have %q, delimiter %q)", ErrBadHeader,
			strings.Join(missing, ", "), truncate(string(line), 120), c.delim)
	}
	c.nfields = len(names)
	return c, nil
}

// detectDelimiter picks ';' when the header has more semicolons than commas.
// Column names never contain either, so the header settles it.
func detectDelimiter(header []byte) byte {
	if bytes.Count(header, []byte{';'}) > bytes.Count(header, []byte{','}) {
		return ';'
	}
	return ','
}

// Delimiter returns the delimiter found in the header.
func (c *CSVReader) Delimiter() byte { return c.delim }

// Line returns the number of the line last read (1-based).
func (c *CSVReader) Line() int { return c.lr.line }

// Next returns the next event (see Reader).
func (c *CSVReader) Next() (Event, error) {
	line, err := c.lr.next()
	if err != nil {
		return Event{}, err
	}
	ev, err := c.decode(line)
	if err != nil {
		return Event{}, &LineError{Line: c.lr.line, Err: err}
	}
	return ev, nil
}

func (c *CSVReader) decode(line []byte) (Event, error) {
	fields, err := c.split(line)
	if err != nil {
		return Event{}, eventErr("", err.Error())
	}
	if len(fields) != c.nfields {
		return Event{}, eventErr("", "expected "+strconv.Itoa(c.nfields)+" fields as in the header, got "+strconv.Itoa(len(fields)))
	}
	get := func(col int) []byte {
		if i := c.col[col]; i >= 0 {
			return fields[i]
		}
		return nil
	}
	var ev Event
	if k, ok := parseKindBytes(get(colKind)); ok {
		ev.Kind = k
	} else {
		return Event{}, eventErr("kind", strconv.Quote(truncate(string(get(colKind)), 32))+" is not one of click, view, cart, purchase")
	}
	if ev.TS, err = parseTSText(string(get(colTS))); err != nil {
		return Event{}, err
	}
	sess, item, id := get(colSession), get(colItem), get(colID)
	var sb strings.Builder
	sb.Grow(len(sess) + len(item) + len(id))
	sb.Write(sess)
	sb.Write(item)
	sb.Write(id)
	all := sb.String()
	ev.Session = all[:len(sess)]
	ev.Item = all[len(sess) : len(sess)+len(item)]
	ev.ID = all[len(sess)+len(item):]
	if err := ev.Validate(); err != nil {
		return Event{}, err
	}
	return ev, nil
}

// split cuts one line into fields. Unquoted fields are sub-slices of line;
// quoted fields are unescaped into a scratch buffer. The result is valid until
// the next call. The rules follow encoding/csv (no lazy quotes, no trimming),
// which FuzzDecodeCSV checks line by line.
func (c *CSVReader) split(line []byte) ([][]byte, error) {
	fields := c.fields[:0]
	c.scratch = c.scratch[:0]
	// Quoted fields are appended to scratch as we go; remember their bounds
	// and resolve the slices at the end, since scratch may move when it grows.
	type span struct{ field, start, end int }
	var spans [8]span
	quoted := spans[:0]
	i := 0
	for {
		if i < len(line) && line[i] == '"' {
			start := len(c.scratch)
			j := i + 1
			for {
				k := bytes.IndexByte(line[j:], '"')
				if k < 0 {
					return nil, errors.New("quoted field not closed on this line (column " + strconv.Itoa(i+1) + ")")
				}
				c.scratch = append(c.scratch, line[j:j+k]...)
				j += k + 1
				if j < len(line) && line[j] == '"' {
					c.scratch = append(c.scratch, '"')
					j++
					continue
				}
				break
			}
			quoted = append(quoted, span{len(fields), start, len(c.scratch)})
			fields = append(fields, nil)
			if j == len(line) {
				break
			}
			if line[j] != c.delim {
				return nil, errors.New(`extraneous or missing " in quoted field (column ` + strconv.Itoa(j+1) + ")")
			}
			i = j + 1
			if i == len(line) {
				fields = append(fields, line[i:i])
				break
			}
			continue
		}
		k := bytes.IndexByte(line[i:], c.delim)
		end := len(line)
		if k >= 0 {
			end = i + k
		}
		f := line[i:end]
		if q := bytes.IndexByte(f, '"'); q >= 0 {
			return nil, errors.New(`bare " in unquoted field (column ` + strconv.Itoa(i+q+1) + ")")
		}
		fields = append(fields, f)
		if k < 0 {
			break
		}
		i = end + 1
		if i == len(line) {
			fields = append(fields, line[i:i])
			break
		}
	}
	for _, s := range quoted {
		fields[s.field] = c.scratch[s.start:s.end]
	}
	c.fields = fields
	return fields, nil
}
