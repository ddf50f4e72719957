package stream

import (
	"bufio"
	"bytes"
	"compress/gzip"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"
)

// MaxLineBytes is the longest input line the file readers accept, line ending
// excluded. A longer line is reported as a *LineError wrapping ErrLineTooLong
// and skipped.
const MaxLineBytes = 1 << 20

// Reader is a source of events read in order, such as a file.
//
// Next returns io.EOF at the end. A bad line returns a *LineError and the
// next call continues with the following line; any other error is final and
// returned again by later calls.
type Reader interface {
	Next() (Event, error)
}

// lineReader splits input into lines without copying short ones, counts
// physical lines and skips blank ones.
type lineReader struct {
	br   *bufio.Reader
	line int    // number of the last line read
	long []byte // scratch for lines longer than the bufio buffer
	err  error  // sticky: io.EOF or a read error
}

func newLineReader(r io.Reader) *lineReader {
	return &lineReader{br: bufio.NewReaderSize(r, 64<<10)}
}

// next returns the next non-blank line without its line ending. The slice is
// valid until the following call. A line over MaxLineBytes yields a
// *LineError after the whole line has been consumed.
func (l *lineReader) next() ([]byte, error) {
	for {
		if l.err != nil {
			return nil, l.err
		}
		frag, err := l.br.ReadSlice('\n')
		line := frag
		tooLong := false
		if err == bufio.ErrBufferFull {
			l.long = append(l.long[:0], frag...)
			for err == bufio.ErrBufferFull {
				frag, err = l.br.ReadSlice('\n')
				if !tooLong && len(l.long)+len(frag) > MaxLineBytes+2 {
					tooLong = true // keep reading to find the end, but stop keeping it
					l.long = l.long[:0]
				}
				if !tooLong {
					l.long = append(l.long, frag...)
				}
			}
			line = l.long
		}
		if err != nil {
			if err != io.EOF {
				l.err = fmt.Errorf("read line %d: %w", l.line+1, err)
				return nil, l.err
			}
			l.err = io.EOF
			if len(line) == 0 && !tooLong {
				return nil, io.EOF
			}
		}
		l.line++
		line = bytes.TrimSuffix(line, []byte{'\n'})
		line = bytes.TrimSuffix(line, []byte{'\r'})
		if l.line == 1 {
			line = bytes.TrimPrefix(line, []byte("\xef\xbb\xbf")) // UTF-8 byte order mark
		}
		if tooLong || len(line) > MaxLineBytes {
			return nil, &LineError{Line: l.line, Err: fmt.Errorf("%w: more than %d bytes", ErrLineTooLong, MaxLineBytes)}
		}
		if isBlank(line) {
			continue
		}
		return line, nil
	}
}

func isBlank(b []byte) bool {
	for _, c := range b {
		if c != ' ' && c != '\t' && c != '\r' {
			return false
		}
	}
	return true
}

// JSONLinesReader reads one JSON event per line (JSON lines / NDJSON).
// Blank lines are skipped.
type JSONLinesReader struct {
	lr *lineReader
}

// NewJSONLinesReader returns a reader of JSON lines from r. Lines may be up to
// MaxLineBytes long; wrap r in a bufio.Reader only if it is not one already
// (the reader buffers itself).
func NewJSONLinesReader(r io.Reader) *JSONLinesReader {
	return &JSONLinesReader{lr: newLineReader(r)}
}

// Next returns the next event (see Reader).
func (r *JSONLinesReader) Next() (Event, error) {
	line, err := r.lr.next()
	if err != nil {
		return Event{}, err
	}
	ev, err := DecodeJSON(line)
	if err != nil {
		return Event{}, &LineError{Line: r.lr.line, Err: err}
	}
	return ev, nil
}

// Line returns the number of the line last read (1-based), for progress
// reports.
func (r *JSONLinesReader) Line() int { return r.lr.line }

// FileReader reads events from a file; see OpenFile.
type FileReader struct {
	Reader
	f  *os.File
	gz *gzip.Reader
}

// OpenFile opens an event file. Gzip is detected from the magic bytes, not the
// name, so a compressed file with any name works. The format comes from the
// name: CSV when it ends in .csv or .csv.gz (any case), JSON lines otherwise.
func OpenFile(path string) (*FileReader, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("open events: %w", err)
	}
	fr := &FileReader{f: f}
	src, gz, err := maybeGunzip(f)
	if err != nil {
		f.Close()
		return nil, fmt.Errorf("open events %s: %w", path, err)
	}
	fr.gz = gz
	if isCSVName(path) {
		cr, err := NewCSVReader(src)
		if err != nil {
			fr.Close()
			return nil, fmt.Errorf("open events %s: %w", path, err)
		}
		fr.Reader = cr
	} else {
		fr.Reader = NewJSONLinesReader(src)
	}
	return fr, nil
}

// NewReader reads events from r the way OpenFile reads a file: gzip detected
// from the magic bytes, CSV when name ends in .csv or .csv.gz. It is meant for
// standard input and uploads where there is a name but no file.
func NewReader(r io.Reader, name string) (Reader, error) {
	src, _, err := maybeGunzip(r)
	if err != nil {
		return nil, err
	}
	if isCSVName(name) {
		return NewCSVReader(src)
	}
	return NewJSONLinesReader(src), nil
}

// Close closes the file.
func (r *FileReader) Close() error {
	var gzErr error
	if r.gz != nil {
		gzErr = r.gz.Close()
	}
	return errors.Join(r.f.Close(), gzErr)
}

func isCSVName(name string) bool {
	name = strings.ToLower(name)
	return strings.HasSuffix(name, ".csv") || strings.HasSuffix(name, ".csv.gz")
}

// maybeGunzip peeks at the first two bytes and unwraps gzip when they are its
// magic number (RFC 1952, section 2.3.1: ID1=0x1f, ID2=0x8b).
func maybeGunzip(r io.Reader) (io.Reader, *gzip.Reader, error) {
	br := bufio.NewReaderSize(r, 64<<10)
	magic, err := br.Peek(2)
	if err != nil && err != io.EOF {
		return nil, nil, fmt.Errorf("read: %w", err)
	}
	if len(magic) == 2 && magic[0] == 0x1f && magic[1] == 0x8b {
		gz, err := gzip.NewReader(br)
		if err != nil {
			return nil, nil, fmt.Errorf("gzip: %w", err)
		}
		return gz, gz, nil
	}
	return br, nil, nil
}
