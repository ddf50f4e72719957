package bare

import (
	"bufio"
	"fmt"
	"io"
	"net"
	"strconv"
	"time"
)

// Redis is a minimal client of the Redis protocol (RESP2), enough for the
// side-by-side benchmark: pipelined commands and their replies. It keeps
// no state beyond the connection.
type Redis struct {
	c net.Conn
	r *bufio.Reader
	w *bufio.Writer
}

// DialRedis connects to addr.
func DialRedis(addr string) (*Redis, error) {
	c, err := net.DialTimeout("tcp", addr, 5*time.Second)
	if err != nil {
		return nil, err
	}
	return &Redis{c: c, r: bufio.NewReaderSize(c, 1<<16), w: bufio.NewWriterSize(c, 1<<16)}, nil
}

// Close closes the connection.
func (r *Redis) Close() error { return r.c.Close() }

// Send buffers one command.
func (r *Redis) Send(args ...string) {
	r.w.WriteByte('*')
	r.w.WriteString(strconv.Itoa(len(args)))
	r.w.WriteString("\r\n")
	for _, a := range args {
		r.w.WriteByte('$')
		r.w.WriteString(strconv.Itoa(len(a)))
		r.w.WriteString("\r\n")
		r.w.WriteString(a)
		r.w.WriteString("\r\n")
	}
}

// Flush writes the buffered commands.
func (r *Redis) Flush() error { return r.w.Flush() }

// Drain sends the buffered commands and reads the n replies they are owed,
// the end of one pipeline.
func (r *Redis) Drain(n int) error {
	if err := r.Flush(); err != nil {
		return err
	}
	for ; n > 0; n-- {
		if _, err := r.Reply(); err != nil {
			return err
		}
	}
	return nil
}

// Reply reads one reply; arrays come back as []any, bulk strings as
// string, integers as int64, errors as an error.
func (r *Redis) Reply() (any, error) {
	line, err := r.r.ReadSlice('\n')
	if err != nil {
		return nil, err
	}
	if len(line) < 3 {
		return nil, fmt.Errorf("redis: short reply %q", line)
	}
	body := string(line[1 : len(line)-2])
	switch line[0] {
	case '+':
		return body, nil
	case '-':
		return nil, fmt.Errorf("redis: %s", body)
	case ':':
		return strconv.ParseInt(body, 10, 64)
	case '$':
		n, err := strconv.Atoi(body)
		if err != nil || n < 0 {
			return nil, err
		}
		buf := make([]byte, n+2)
		if _, err := io.ReadFull(r.r, buf); err != nil {
			return nil, err
		}
		return string(buf[:n]), nil
	case '*':
		n, err := strconv.Atoi(body)
		if err != nil || n < 0 {
			return nil, err
		}
		out := make([]any, n)
		for i := range out {
			if out[i], err = r.Reply(); err != nil {
				return nil, err
			}
		}
		return out, nil
	}
	return nil, fmt.Errorf("redis: unknown reply %q", line)
}

// Do sends one command and reads its reply.
func (r *Redis) Do(args ...string) (any, error) {
	r.Send(args...)
	if err := r.Flush(); err != nil {
		return nil, err
	}
	return r.Reply()
}
