package dataset

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"io"
	"strconv"
	"time"
	"unicode/utf8"

	"waymark/stream"
)

// MSNBCOptions configures [NewMSNBCReader].
type MSNBCOptions struct {
	// Start is the time of the first click (default 1999-09-28T00:00:00Z,
	// the day the log was recorded).
	Start time.Time
	// Step separates consecutive clicks (default 10 ms, at least 1 ms). The
	// 4.7 million clicks then span about 13 hours, inside the recorded day,
	// and no session comes near the 30-minute inactivity timeout.
	Step time.Duration
	// SessionPrefix goes before the session's number, 1 for the first
	// sequence of the file (default "msnbc-").
	SessionPrefix string
	// MaxSessions stops after this many sessions; 0 reads them all.
	MaxSessions int
}

// DefaultMSNBCOptions returns the defaults documented on MSNBCOptions.
func DefaultMSNBCOptions() MSNBCOptions {
	return MSNBCOptions{
		Start:         time.Date(1999, 9, 28, 0, 0, 0, 0, time.UTC),
		Step:          10 * time.Millisecond,
		SessionPrefix: "msnbc-",
	}
}

func (o *MSNBCOptions) validate() error {
	d := DefaultMSNBCOptions()
	if o.Start.IsZero() {
		o.Start = d.Start
	}
	if o.Step == 0 {
		o.Step = d.Step
	}
	if o.SessionPrefix == "" {
		o.SessionPrefix = d.SessionPrefix
	}
	switch {
	case o.Step < time.Millisecond:
		return fmt.Errorf("%w: Step %s below 1ms (event times have millisecond resolution)", ErrBadOption, o.Step)
	case o.Start.UnixMilli() <= 0:
		return fmt.Errorf("%w: Start %s not after 1970", ErrBadOption, o.Start)
	case len(o.SessionPrefix) > stream.MaxSessionBytes-20:
		return fmt.Errorf("%w: SessionPrefix longer than %d bytes", ErrBadOption, stream.MaxSessionBytes-20)
	case o.MaxSessions < 0:
		return fmt.Errorf("%w: MaxSessions %d is negative", ErrBadOption, o.MaxSessions)
	}
	return nil
}

// MSNBCReader reads the MSNBC sequence file; see the package doc.
type MSNBCReader struct {
	opts     MSNBCOptions
	sc       *bufio.Scanner
	cats     []string
	line     int
	sessions int
	clicks   int64
	step     int64
	start    int64
	cur      []int // category indexes of the current line
	pos      int
	key      string
	err      error
}

// msnbcMarker is the header line after which the sequences start.
var msnbcMarker = []byte("% Sequences:")

// NewMSNBCReader reads the header of an MSNBC sequence file (uncompressed;
// Open unwraps gzip) and returns a reader of its clicks.
func NewMSNBCReader(r io.Reader, opts MSNBCOptions) (*MSNBCReader, error) {
	if err := opts.validate(); err != nil {
		return nil, err
	}
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 0, 64<<10), stream.MaxLineBytes)
	m := &MSNBCReader{opts: opts, sc: sc, step: opts.Step.Milliseconds(), start: opts.Start.UnixMilli()}
	for {
		line, ok := m.scan()
		if !ok {
			if m.err != nil && !errors.Is(m.err, io.EOF) {
				return nil, fmt.Errorf("msnbc header: %w", m.err)
			}
			return nil, fmt.Errorf("%w: msnbc: no %q line", ErrBadHeader, msnbcMarker)
		}
		if bytes.HasPrefix(line, msnbcMarker) {
			break
		}
		if len(line) == 0 || line[0] == '%' {
			continue
		}
		if m.cats != nil {
			return nil, fmt.Errorf("%w: msnbc: line %d: a second list of category names", ErrBadHeader, m.line)
		}
		for _, f := range bytes.Fields(line) {
			m.cats = append(m.cats, string(f))
		}
	}
	if len(m.cats) == 0 {
		return nil, fmt.Errorf("%w: msnbc: no category names before %q", ErrBadHeader, msnbcMarker)
	}
	for i, c := range m.cats {
		// Category names become item ids: refuse the header rather than
		// every click on a name no event may carry.
		ev := stream.Event{Session: opts.SessionPrefix + "1", Item: c, TS: 1}
		if err := ev.Validate(); err != nil {
			return nil, fmt.Errorf("%w: msnbc: category %d: %w", ErrBadHeader, i+1, err)
		}
	}
	return m, nil
}

// scan returns the next line without its line ending.
func (m *MSNBCReader) scan() ([]byte, bool) {
	if !m.sc.Scan() {
		if err := m.sc.Err(); err != nil {
			m.err = fmt.Errorf("read line %d: %w", m.line+1, err)
		} else {
			m.err = io.EOF
		}
		return nil, false
	}
	m.line++
	return bytes.TrimRight(m.sc.Bytes(), "\r \t"), true
}

// Categories returns the category names of the header, in file order; the
// sequences' number n is Categories()[n-1].
func (m *MSNBCReader) Categories() []string { return m.cats }

// Line returns the number of the line last read (1-based).
func (m *MSNBCReader) Line() int { return m.line }

// Sessions returns how many sessions have been started so far.
func (m *MSNBCReader) Sessions() int { return m.sessions }

// Next returns the next click (see the package doc).
func (m *MSNBCReader) Next() (stream.Event, error) {
	for m.pos >= len(m.cur) {
		if m.err != nil {
			return stream.Event{}, m.err
		}
		if m.opts.MaxSessions > 0 && m.sessions >= m.opts.MaxSessions {
			m.err = io.EOF
			return stream.Event{}, m.err
		}
		line, ok := m.scan()
		if !ok {
			return stream.Event{}, m.err
		}
		if len(bytes.TrimSpace(line)) == 0 {
			continue
		}
		if err := m.parse(line); err != nil {
			return stream.Event{}, &stream.LineError{Line: m.line, Err: err}
		}
		m.sessions++
		m.key = m.opts.SessionPrefix + strconv.Itoa(m.sessions)
		m.pos = 0
	}
	ev := stream.Event{
		Session: m.key,
		Item:    m.cats[m.cur[m.pos]],
		TS:      m.start + m.clicks*m.step,
	}
	m.pos++
	m.clicks++
	return ev, nil
}

// parse reads one sequence line into m.cur; on error m.cur is left empty.
func (m *MSNBCReader) parse(line []byte) error {
	m.cur = m.cur[:0]
	for _, f := range bytes.Fields(line) {
		n, err := strconv.Atoi(string(f))
		if err != nil || n < 1 || n > len(m.cats) {
			m.cur = m.cur[:0]
			return fmt.Errorf("%w: msnbc: %q is not a category number 1..%d", ErrBadRecord, truncate(string(f), 20), len(m.cats))
		}
		m.cur = append(m.cur, n-1)
	}
	return nil
}

// truncate shortens s for an error message, on a rune boundary.
func truncate(s string, n int) string {
	if len(s) <= n {
		return s
	}
	for n > 0 && !utf8.RuneStart(s[n]) {
		n--
	}
	return s[:n] + "..."
}
