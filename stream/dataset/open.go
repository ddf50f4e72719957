package dataset

import (
	"bufio"
	"bytes"
	"compress/gzip"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"

	"waymark/stream"
)

// Formats Open knows.
const (
	FormatAuto   = "auto"   // decide by content: msnbc, eshop, else events
	FormatEvents = "events" // the project's JSON lines or CSV (stream.OpenFile)
	FormatMSNBC  = "msnbc"
	FormatEshop  = "eshop"
	FormatCSV    = "csv"    // the project's CSV whatever the file's name
	FormatNDJSON = "ndjson" // the project's JSON lines whatever the file's name
)

// Formats lists the format names Open accepts.
func Formats() []string {
	return []string{FormatAuto, FormatEvents, FormatMSNBC, FormatEshop, FormatCSV, FormatNDJSON}
}

// File is an open dataset or event file.
type File struct {
	stream.Reader
	format string
	f      *os.File
	gz     *gzip.Reader
}

// Format returns the format the file was read as (never "auto").
func (f *File) Format() string { return f.format }

// TakeItems returns the catalogue records the file produced since the last
// call (see EshopReader.TakeItems); formats without records return none.
func (f *File) TakeItems() []stream.ItemRecord {
	if t, ok := f.Reader.(interface{ TakeItems() []stream.ItemRecord }); ok {
		return t.TakeItems()
	}
	return nil
}

// Line returns the number of the line last read, when the reader counts.
func (f *File) Line() int {
	if l, ok := f.Reader.(interface{ Line() int }); ok {
		return l.Line()
	}
	return 0
}

// Close closes the file.
func (f *File) Close() error {
	var gzErr error
	if f.gz != nil {
		gzErr = f.gz.Close()
	}
	return errors.Join(f.f.Close(), gzErr)
}

// Open opens path in the given format (see the package doc) with the
// default options of each reader.
func Open(path, format string) (*File, error) {
	switch format {
	case "", FormatAuto, FormatEvents, FormatMSNBC, FormatEshop, FormatCSV, FormatNDJSON:
	default:
		return nil, fmt.Errorf("%w: %q (known: %s)", ErrUnknownFormat, format, strings.Join(Formats(), ", "))
	}
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("open dataset: %w", err)
	}
	file := &File{f: f}
	br := bufio.NewReaderSize(f, 64<<10)
	var src io.Reader = br
	if magic, _ := br.Peek(2); len(magic) == 2 && magic[0] == 0x1f && magic[1] == 0x8b {
		gz, err := gzip.NewReader(br)
		if err != nil {
			f.Close()
			return nil, fmt.Errorf("open dataset %s: gzip: %w", path, err)
		}
		file.gz = gz
		src = gz
	}
	body := bufio.NewReaderSize(src, 64<<10)
	if format == "" || format == FormatAuto {
		format = sniff(body)
	}
	file.format = format
	switch format {
	case FormatMSNBC:
		file.Reader, err = NewMSNBCReader(body, DefaultMSNBCOptions())
	case FormatEshop:
		file.Reader, err = NewEshopReader(body, DefaultEshopOptions())
	case FormatCSV:
		file.Reader, err = stream.NewCSVReader(body)
	case FormatNDJSON:
		file.Reader = stream.NewJSONLinesReader(body)
	default:
		// The name still decides between CSV and JSON lines; drop a .gz
		// suffix since the content is already unwrapped.
		file.Reader, err = stream.NewReader(body, strings.TrimSuffix(strings.ToLower(path), ".gz"))
	}
	if err != nil {
		file.Close()
		return nil, fmt.Errorf("open dataset %s (%s): %w", path, format, err)
	}
	return file, nil
}

// sniff tells the formats apart by their first line: the MSNBC file starts
// with a '%' comment, the e-shop file with its fixed header.
func sniff(r *bufio.Reader) string {
	head, _ := r.Peek(256)
	head = bytes.TrimPrefix(head, []byte("\xef\xbb\xbf"))
	switch {
	case bytes.HasPrefix(head, []byte("%")):
		return FormatMSNBC
	case bytes.HasPrefix(head, []byte(strings.Join(eshopHeader[:4], ";"))):
		return FormatEshop
	}
	return FormatEvents
}
