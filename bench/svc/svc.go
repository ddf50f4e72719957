// Package svc starts and stops a `waymark serve` process for the benchmark
// programs: free loopback ports, a data folder, health and stats polling,
// and a clean stop by SIGTERM (the service flushes and checkpoints).
package svc

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"time"
)

// Serve is a running `waymark serve`.
type Serve struct {
	Cmd     *exec.Cmd
	HTTP    string // base URL, http://127.0.0.1:port
	NATS    string // nats://127.0.0.1:port
	Debug   string // pprof address, host:port
	Dir     string
	Started time.Time
	log     *os.File
	done    chan error
}

// FreePort returns a loopback port that was free a moment ago.
func FreePort() (int, error) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return 0, err
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port, nil
}

// Start starts bin serve on data folder dir with the embedded NATS server
// and extra flags, logging to dir/../<base>.log, and returns at once (see
// WaitHealthy, WaitReady).
func Start(bin, dir string, extra ...string) (*Serve, error) {
	hp, err := FreePort()
	if err != nil {
		return nil, err
	}
	np, err := FreePort()
	if err != nil {
		return nil, err
	}
	dp, err := FreePort()
	if err != nil {
		return nil, err
	}
	s := &Serve{
		HTTP:  fmt.Sprintf("http://127.0.0.1:%d", hp),
		NATS:  fmt.Sprintf("nats://127.0.0.1:%d", np),
		Debug: fmt.Sprintf("127.0.0.1:%d", dp),
		Dir:   dir,
		done:  make(chan error, 1),
	}
	args := append([]string{"serve", "--data", dir,
		"--http", fmt.Sprintf("127.0.0.1:%d", hp),
		"--nats-listen", fmt.Sprintf("127.0.0.1:%d", np),
		"--debug-addr", s.Debug,
		"--log-level", "warn"}, extra...)
	s.log, err = os.Create(filepath.Clean(dir) + ".log")
	if err != nil {
		return nil, err
	}
	s.Cmd = exec.Command(bin, args...)
	s.Cmd.Stdout, s.Cmd.Stderr = s.log, s.log
	s.Started = time.Now()
	if err := s.Cmd.Start(); err != nil {
		s.log.Close()
		return nil, fmt.Errorf("start %s: %w", bin, err)
	}
	go func() { s.done <- s.Cmd.Wait() }()
	return s, nil
}

// WaitHealthy waits until /healthz answers 200.
func (s *Serve) WaitHealthy(timeout time.Duration) error {
	return s.wait("/healthz", timeout, 5*time.Millisecond)
}

// WaitReady waits until /readyz answers 200 and returns the time from the
// process start.
func (s *Serve) WaitReady(timeout time.Duration) (time.Duration, error) {
	if err := s.wait("/readyz", timeout, 2*time.Millisecond); err != nil {
		return 0, err
	}
	return time.Since(s.Started), nil
}

var client = &http.Client{Timeout: 5 * time.Second}

func (s *Serve) wait(path string, timeout, every time.Duration) error {
	deadline := time.Now().Add(timeout)
	for time.Now().Before(deadline) {
		select {
		case err := <-s.done:
			s.done <- err
			return fmt.Errorf("serve exited: %v (log %s)", err, s.log.Name())
		default:
		}
		resp, err := client.Get(s.HTTP + path)
		if err == nil {
			io.Copy(io.Discard, resp.Body)
			resp.Body.Close()
			if resp.StatusCode == http.StatusOK {
				return nil
			}
		}
		time.Sleep(every)
	}
	return fmt.Errorf("%s not 200 after %s (log %s)", path, timeout, s.log.Name())
}

// Stats is the part of /v1/stats the benchmarks read.
type Stats struct {
	Applied  uint64 `json:"events_applied"`
	Rejected uint64 `json:"events_rejected"`
	LastSeq  uint64 `json:"last_sequence"`
	Lag      uint64 `json:"consumer_lag"`
	Items    int    `json:"items"`
	Sessions int    `json:"sessions_active"`
}

// Stats reads /v1/stats.
func (s *Serve) Stats() (Stats, error) {
	var st Stats
	resp, err := client.Get(s.HTTP + "/v1/stats")
	if err != nil {
		return st, err
	}
	defer resp.Body.Close()
	if resp.StatusCode != http.StatusOK {
		return st, fmt.Errorf("stats: %s", resp.Status)
	}
	return st, json.NewDecoder(resp.Body).Decode(&st)
}

// Progress is the result of WaitApplied.
type Progress struct {
	First, Last time.Time // when applied was first seen above 0, and at n
	AtFirst     uint64    // applied at First
	N           uint64
}

// Rate returns events per second between First and Last.
func (p Progress) Rate() float64 {
	d := p.Last.Sub(p.First).Seconds()
	if d <= 0 {
		return 0
	}
	return float64(p.N-p.AtFirst) / d
}

// WaitApplied polls /v1/stats every `every` until n events are applied.
func (s *Serve) WaitApplied(n uint64, every, timeout time.Duration) (Progress, error) {
	var p Progress
	deadline := time.Now().Add(timeout)
	for time.Now().Before(deadline) {
		st, err := s.Stats()
		now := time.Now()
		if err == nil {
			if st.Applied > 0 && p.First.IsZero() {
				p.First, p.AtFirst = now, st.Applied
			}
			if st.Applied+st.Rejected >= n {
				p.Last, p.N = now, st.Applied
				if st.Rejected > 0 {
					return p, fmt.Errorf("%d events rejected", st.Rejected)
				}
				return p, nil
			}
		}
		select {
		case err := <-s.done:
			s.done <- err
			return p, fmt.Errorf("serve exited: %v (log %s)", err, s.log.Name())
		case <-time.After(every):
		}
	}
	return p, fmt.Errorf("%d events not applied after %s", n, timeout)
}

// Post sends a JSON body and returns the response body.
func (s *Serve) Post(path string, body []byte) ([]byte, error) {
	resp, err := client.Post(s.HTTP+path, "application/json", bytes.NewReader(body))
	if err != nil {
		return nil, err
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if resp.StatusCode != http.StatusOK {
		return b, fmt.Errorf("POST %s: %s: %s", path, resp.Status, strings.TrimSpace(string(b)))
	}
	return b, err
}

// Profile saves a CPU profile of the running service for d to path.
func (s *Serve) Profile(ctx context.Context, d time.Duration, path string) error {
	req, err := http.NewRequestWithContext(ctx, http.MethodGet, fmt.Sprintf("http://%s/debug/pprof/profile?seconds=%d", s.Debug, int(d.Seconds())), nil)
	if err != nil {
		return err
	}
	resp, err := (&http.Client{Timeout: d + 30*time.Second}).Do(req)
	if err != nil {
		return err
	}
	defer resp.Body.Close()
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	defer f.Close()
	_, err = io.Copy(f, resp.Body)
	return err
}

// Stop sends SIGTERM and waits for the process to exit (killing it after
// timeout).
func (s *Serve) Stop(timeout time.Duration) error {
	defer s.log.Close()
	if err := s.Cmd.Process.Signal(syscall.SIGTERM); err != nil && !errors.Is(err, os.ErrProcessDone) {
		return err
	}
	select {
	case err := <-s.done:
		var ee *exec.ExitError
		if errors.As(err, &ee) && ee.ExitCode() > 0 {
			return fmt.Errorf("serve exited with %d (log %s)", ee.ExitCode(), s.log.Name())
		}
		return nil
	case <-time.After(timeout):
		s.Cmd.Process.Kill()
		<-s.done
		return fmt.Errorf("serve did not stop within %s; killed", timeout)
	}
}

// CopyDir copies a folder tree (a pre-filled stream template) with cp -a.
func CopyDir(src, dst string) error {
	if out, err := exec.Command("cp", "-a", src, dst).CombinedOutput(); err != nil {
		return fmt.Errorf("cp -a %s %s: %v: %s", src, dst, err, out)
	}
	return nil
}

// Metrics reads /metrics and returns the samples whose name starts with
// one of prefixes (labels included in the key), e.g. "waymark_flush".
func (s *Serve) Metrics(prefixes ...string) (map[string]float64, error) {
	resp, err := client.Get(s.HTTP + "/metrics")
	if err != nil {
		return nil, err
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		return nil, err
	}
	out := map[string]float64{}
	for _, l := range strings.Split(string(b), "\n") {
		if l == "" || l[0] == '#' {
			continue
		}
		for _, p := range prefixes {
			if strings.HasPrefix(l, p) {
				i := strings.LastIndexByte(l, ' ')
				if v, err := strconv.ParseFloat(l[i+1:], 64); err == nil {
					out[l[:i]] = v
				}
			}
		}
	}
	return out, nil
}
