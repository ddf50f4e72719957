// Command crashloop is issue 5's crash-loop check: it kills `waymark serve`
// with SIGKILL at random moments while a stream of events is being
// published and learned, restarts it on the same data folder each time,
// and then compares the result with a clean run of the same binary on the
// same events.
//
// One run:
//
//  1. Generate N events (bench/synth: Zipf items, interleaved sessions)
//     into an NDJSON file, one canonical JSON object a line.
//  2. Crash run: start `waymark serve` (embedded NATS, its JetStream files
//     in the data folder) and publish the file with `waymark send`. At
//     each of K random points of ingest (uniform over events_applied,
//     plus a random delay up to 150 ms so kills land in every phase:
//     publish, apply, flush, commit, ack) kill serve with SIGKILL. The
//     embedded bus dies with it, so the sender dies too (it is killed as
//     well); after the restart the program reads how many events the
//     stream holds and publishes the rest from there, as a producer that
//     resumes from the log's position would.
//  3. Wait until events_applied reaches N; read the whole stream back and
//     check it holds every event once, in order; record the stats, the
//     neighbour list of every item, the popular list and /v1/score
//     answers for a sample of sessions.
//  4. Clean run: a new data folder, the whole file sent once, no kill;
//     the same figures; every answer must be byte-for-byte the same.
//
// It prints one line per kill and a summary, and exits 1 if anything
// differs.
//
// --case picks what runs (cases.go describes each and what it expects):
// kills is the loop above (the default); idflood sends events that each
// carry a new session and a new item id to serve at default flags;
// corrupt-sst, truncate-sst and delete-checkpoint damage a stopped
// service's store and start it again; all runs every case.
//
//	go build -o /tmp/waymark ./cmd/waymark
//	go run ./bench/crashloop --bin /tmp/waymark --events 1000000 --kills 20
//	go run ./bench/crashloop --bin /tmp/waymark --case idflood --events 1000000
//	go run ./bench/crashloop --bin /tmp/waymark --case corrupt-sst,truncate-sst,delete-checkpoint --events 200000
package main

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"math/rand/v2"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"syscall"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"waymark/bench/synth"
	"waymark/stream"
)

type config struct {
	bin     string
	events  int
	items   int
	kills   int
	seed    uint64
	scores  int
	dir     string
	keep    bool
	timeout time.Duration
	verify  bool
	cases   string
}

// serveArgs are extra flags for every serve the program starts
// (--serve-args); startServe reads them.
var serveArgs []string

func main() {
	var c config
	flag.StringVar(&c.bin, "bin", "", "waymark `binary` (empty: build ./cmd/waymark into the work folder)")
	flag.IntVar(&c.events, "events", 1_000_000, "events to ingest")
	flag.IntVar(&c.items, "items", 5000, "catalogue size of the generated stream")
	flag.IntVar(&c.kills, "kills", 20, "SIGKILLs during ingest")
	flag.Uint64Var(&c.seed, "seed", 1, "seed of the events and of the kill schedule")
	flag.IntVar(&c.scores, "scores", 300, "sessions whose /v1/score answers are compared")
	flag.StringVar(&c.dir, "dir", "", "work `folder` (empty: a new temporary one)")
	flag.BoolVar(&c.keep, "keep", false, "keep the work folder")
	flag.DurationVar(&c.timeout, "timeout", 20*time.Minute, "give up after this long")
	flag.BoolVar(&c.verify, "verify-stream", true, "read the crash run's stream back and compare it with the events")
	flag.StringVar(&c.cases, "case", "kills", "comma-separated `cases`: kills, idflood, corrupt-sst, truncate-sst, delete-checkpoint, or all")
	extra := flag.String("serve-args", "", "extra `flags` for serve, space-separated (e.g. \"--flush-interval 1h\": on a slow host the 2 s interval\nflushes before --flush-events is reached, and idflood then never builds the largest flush)")
	flag.Parse()
	serveArgs = strings.Fields(*extra)
	if c.events < 1 || c.kills < 0 {
		fmt.Fprintln(os.Stderr, "crashloop: --events must be positive and --kills not negative")
		os.Exit(2)
	}
	ctx, cancel := context.WithTimeout(context.Background(), c.timeout)
	defer cancel()
	if err := runCases(ctx, c); err != nil {
		fmt.Fprintln(os.Stderr, "crashloop: FAIL:", err)
		os.Exit(1)
	}
}

// runCases runs each case named in c.cases in its own subfolder of the
// work folder, with one binary, and fails if any failed.
func runCases(ctx context.Context, c config) (err error) {
	names := strings.Split(c.cases, ",")
	if c.cases == "all" {
		names = caseNames
	}
	for _, n := range names {
		if !slices.Contains(caseNames, n) {
			return fmt.Errorf("unknown case %q (want %s or all)", n, strings.Join(caseNames, ", "))
		}
	}
	if c.dir == "" {
		if c.dir, err = os.MkdirTemp("", "crashloop-"); err != nil {
			return err
		}
	}
	if err := os.MkdirAll(c.dir, 0o755); err != nil {
		return err
	}
	if !c.keep {
		defer os.RemoveAll(c.dir)
	}
	if c.bin == "" {
		c.bin = filepath.Join(c.dir, "waymark")
		out, err := exec.CommandContext(ctx, "go", "build", "-o", c.bin, "./cmd/waymark").CombinedOutput()
		if err != nil {
			return fmt.Errorf("go build: %v: %s", err, out)
		}
	}
	var failed []string
	for _, n := range names {
		cc := c
		cc.dir, cc.keep = filepath.Join(c.dir, n), true // the parent is removed as a whole
		if err := os.MkdirAll(cc.dir, 0o755); err != nil {
			return err
		}
		var err error
		switch n {
		case "kills":
			err = run(ctx, cc)
		case "idflood":
			err = floodRun(ctx, cc)
		default:
			err = damageRun(ctx, cc, n)
		}
		if err != nil {
			fmt.Printf("case %s: FAIL: %v\n", n, err)
			failed = append(failed, n)
		} else {
			fmt.Printf("case %s: PASS\n", n)
		}
	}
	if len(failed) > 0 {
		return fmt.Errorf("%d of %d cases failed: %s", len(failed), len(names), strings.Join(failed, ", "))
	}
	return nil
}

// run is the kills case; the case runner has made c.dir and c.bin.
func run(ctx context.Context, c config) (err error) {
	start := time.Now()
	evs, lines, names := generated(c)
	fmt.Printf("crashloop: %d events, %d items, %d kills, seed %d, binary %s\n", len(evs), len(names), c.kills, c.seed, c.bin)
	probe := scoreProbe(evs, c.scores, c.seed)

	crash, err := crashRun(ctx, c, lines)
	if err != nil {
		return fmt.Errorf("crash run: %w", err)
	}
	crashAns, err := answers(ctx, crash.srv, names, probe)
	crash.srv.stop()
	if err != nil {
		return err
	}
	cleanStart := time.Now()
	clean, cleanAns, err := cleanRun(ctx, c, lines, names, probe)
	if err != nil {
		return fmt.Errorf("clean run: %w", err)
	}
	fmt.Printf("clean run: %d applied, %d rejected, stream last %d, in %.1fs\n", clean.Applied, clean.Rejected, clean.StreamLast, time.Since(cleanStart).Seconds())

	var problems []string
	if crash.final.Applied != uint64(c.events) {
		problems = append(problems, fmt.Sprintf("crash run events_applied = %d, want exactly %d", crash.final.Applied, c.events))
	}
	if crash.final.StreamLast != uint64(c.events) || crash.final.LastSeq != uint64(c.events) {
		problems = append(problems, fmt.Sprintf("crash run stream last %d, last applied %d, want %d", crash.final.StreamLast, crash.final.LastSeq, c.events))
	}
	if crash.final.Rejected != 0 {
		problems = append(problems, fmt.Sprintf("crash run rejected %d events", crash.final.Rejected))
	}
	if clean.Applied != uint64(c.events) {
		problems = append(problems, fmt.Sprintf("clean run events_applied = %d, want %d", clean.Applied, c.events))
	}
	if crash.final.Items != clean.Items || crash.final.Sessions != clean.Sessions {
		problems = append(problems, fmt.Sprintf("items/sessions %d/%d after crashes, %d/%d clean", crash.final.Items, crash.final.Sessions, clean.Items, clean.Sessions))
	}
	diffs := compare(crashAns, cleanAns, "after crashes", "clean run    ")
	problems = append(problems, diffs...)
	nonEmpty := 0
	for _, n := range names {
		if !bytes.Contains(crashAns["neighbors "+n], []byte(`"neighbors":[]`)) {
			nonEmpty++
		}
	}
	fmt.Printf("summary: %d kills (%d during publishing, %d with everything published), events_applied %d (want %d), stream holds %d messages%s\n",
		len(crash.kills), crash.duringSend(), len(crash.kills)-crash.duringSend(), crash.final.Applied, c.events, crash.final.StreamLast, crash.verified)
	fmt.Printf("summary: compared %d answers (neighbour lists of %d items, %d non-empty; popular top 100; %d score requests): %d differ\n",
		len(cleanAns), len(names), nonEmpty, len(probe), len(diffs))
	fmt.Printf("summary: crash run took %.1fs (restarts %.1fs in all, longest %.1fs), whole check %.1fs\n",
		crash.took.Seconds(), crash.restarts.Seconds(), crash.longest.Seconds(), time.Since(start).Seconds())
	if len(problems) > 0 {
		for _, p := range problems[:min(len(problems), 20)] {
			fmt.Println("  DIFF", p)
		}
		return fmt.Errorf("%d problems", len(problems))
	}
	fmt.Println("crashloop: PASS")
	return nil
}

// kill is one SIGKILL of the crash run.
type kill struct {
	target, applied, stored uint64
	sending                 bool
	delay                   time.Duration
}

type crashResult struct {
	srv      *serve
	final    stats
	kills    []kill
	took     time.Duration
	restarts time.Duration
	longest  time.Duration
	verified string
}

func (r *crashResult) duringSend() int {
	n := 0
	for _, k := range r.kills {
		if k.sending {
			n++
		}
	}
	return n
}

func crashRun(ctx context.Context, c config, lines [][]byte) (*crashResult, error) {
	n := uint64(len(lines))
	rng := rand.New(rand.NewPCG(c.seed, 0xc4a5))
	targets := make([]uint64, c.kills)
	for i := range targets {
		targets[i] = 1 + rng.Uint64N(n-1)
	}
	slices.Sort(targets)
	dir := filepath.Join(c.dir, "crash")
	ports, err := freePorts(2)
	if err != nil {
		return nil, err
	}
	res := &crashResult{}
	start := time.Now()
	var snd *sender
	for i := 0; ; i++ {
		t0 := time.Now()
		srv, err := startServe(ctx, c.bin, dir, ports, fmt.Sprintf("%s.%02d.log", dir, i))
		if err != nil {
			return nil, err
		}
		d := time.Since(t0)
		res.restarts += d
		res.longest = max(res.longest, d)
		stored, err := storedCount(ctx, srv.nats)
		if err != nil {
			srv.kill()
			return nil, err
		}
		if i > 0 {
			res.kills[i-1].stored = stored
		}
		if stored < n {
			if snd, err = startSender(ctx, c.bin, srv.nats, lines[stored:], filepath.Join(c.dir, "tail.ndjson")); err != nil {
				srv.kill()
				return nil, err
			}
		}
		if i == len(targets) {
			res.srv = srv
			break
		}
		target := targets[i]
		if err := srv.waitApplied(ctx, target, 2*time.Millisecond); err != nil {
			srv.kill()
			return nil, err
		}
		delay := time.Duration(rng.IntN(150)) * time.Millisecond
		time.Sleep(delay)
		k := kill{target: target, delay: delay}
		st, _ := srv.stats(ctx)
		k.applied = st.Applied
		k.sending = snd != nil && snd.running()
		srv.kill()
		if snd != nil {
			snd.kill()
			snd = nil
		}
		// How much of the stream survived the kill is read at the restart.
		res.kills = append(res.kills, k)
	}
	// Print the kills with the stored count each restart found.
	for i, k := range res.kills {
		fmt.Printf("kill %2d: target %7d, delay %3dms, applied %7d at the kill, publishing %-5v, stream held %7d at the restart\n",
			i+1, k.target, k.delay.Milliseconds(), k.applied, k.sending, k.stored)
	}
	if snd != nil {
		if err := snd.wait(ctx); err != nil {
			res.srv.kill()
			return nil, fmt.Errorf("final send: %w", err)
		}
	}
	if err := res.srv.waitApplied(ctx, n, 20*time.Millisecond); err != nil {
		res.srv.kill()
		return nil, err
	}
	// Let a late duplicate, if the log had one, arrive before the figures
	// are read.
	time.Sleep(2 * time.Second)
	st, err := res.srv.stats(ctx)
	if err != nil {
		res.srv.kill()
		return nil, err
	}
	res.final = st
	res.took = time.Since(start)
	fmt.Printf("crash run: %d applied, %d rejected, last applied seq %d, stream last %d, %d items, %d sessions, in %.1fs\n",
		st.Applied, st.Rejected, st.LastSeq, st.StreamLast, st.Items, st.Sessions, res.took.Seconds())
	if c.verify {
		if err := verifyStream(ctx, res.srv.nats, lines); err != nil {
			res.srv.kill()
			return nil, err
		}
		res.verified = " (read back: every event once, in order)"
	}
	return res, nil
}

func cleanRun(ctx context.Context, c config, lines [][]byte, names []string, probe [][]byte) (stats, map[string][]byte, error) {
	dir := filepath.Join(c.dir, "clean")
	ports, err := freePorts(2)
	if err != nil {
		return stats{}, nil, err
	}
	srv, err := startServe(ctx, c.bin, dir, ports, dir+".log")
	if err != nil {
		return stats{}, nil, err
	}
	defer srv.stop()
	snd, err := startSender(ctx, c.bin, srv.nats, lines, filepath.Join(c.dir, "all.ndjson"))
	if err != nil {
		return stats{}, nil, err
	}
	if err := snd.wait(ctx); err != nil {
		return stats{}, nil, err
	}
	if err := srv.waitApplied(ctx, uint64(len(lines)), 20*time.Millisecond); err != nil {
		return stats{}, nil, err
	}
	time.Sleep(2 * time.Second)
	st, err := srv.stats(ctx)
	if err != nil {
		return st, nil, err
	}
	ans, err := answers(ctx, srv, names, probe)
	return st, ans, err
}

// scoreProbe builds /v1/score bodies from sessions of the stream: a prefix
// of each and, as candidates, the items that followed it plus a few that
// did not, so every signal has something to score.
func scoreProbe(evs []stream.Event, n int, seed uint64) [][]byte {
	rng := rand.New(rand.NewPCG(seed, 0x5c0e))
	bySession := map[string][]string{}
	var order []string
	for i := range evs {
		s := evs[i].Session
		if _, ok := bySession[s]; !ok {
			order = append(order, s)
		}
		bySession[s] = append(bySession[s], evs[i].Item)
	}
	var out [][]byte
	for len(out) < n && len(order) > 0 {
		s := order[rng.IntN(len(order))]
		seq := bySession[s]
		if len(seq) < 2 {
			continue
		}
		cut := 1 + rng.IntN(len(seq)-1)
		cands := append([]string(nil), seq[cut:]...)
		for range 5 {
			cands = append(cands, evs[rng.IntN(len(evs))].Item)
		}
		cands = append(cands, "never-clicked-item")
		b, _ := json.Marshal(map[string]any{"items": seq[:cut], "candidates": cands})
		out = append(out, b)
	}
	return out
}

// answers collects the raw JSON bodies of the compared queries.
func answers(ctx context.Context, s *serve, names []string, probe [][]byte) (map[string][]byte, error) {
	out := make(map[string][]byte, len(names)+len(probe)+1)
	for _, n := range names {
		b, err := s.get(ctx, "/v1/items/"+n+"/neighbors?k=20")
		if err != nil {
			return nil, err
		}
		out["neighbors "+n] = b
	}
	b, err := s.get(ctx, "/v1/popular?k=100")
	if err != nil {
		return nil, err
	}
	out["popular"] = b
	for i, body := range probe {
		b, err := s.post(ctx, "/v1/score", body)
		if err != nil {
			return nil, err
		}
		out[fmt.Sprintf("score %d %s", i, body)] = b
	}
	return out, nil
}

// compare lists the answers of want that got does not give byte for byte,
// each with the two bodies under their labels.
func compare(got, want map[string][]byte, gotLabel, wantLabel string) []string {
	var diffs []string
	keys := make([]string, 0, len(want))
	for k := range want {
		keys = append(keys, k)
	}
	slices.Sort(keys)
	for _, k := range keys {
		if !bytes.Equal(got[k], want[k]) {
			diffs = append(diffs, fmt.Sprintf("%s:\n    %s %s\n    %s %s", k, gotLabel, trim(got[k]), wantLabel, trim(want[k])))
		}
	}
	return diffs
}

func trim(b []byte) string {
	s := strings.TrimSpace(string(b))
	if len(s) > 300 {
		s = s[:300] + "..."
	}
	return s
}

// storedCount returns the events stream's message count, connecting to the
// bus afresh (the stream is created by serve before it listens).
func storedCount(ctx context.Context, url string) (uint64, error) {
	bo := stream.DefaultBusOptions()
	bo.URL, bo.Name = url, "crashloop"
	b, err := stream.Connect(ctx, bo)
	if err != nil {
		return 0, err
	}
	defer b.Close()
	return b.LastSequence(ctx)
}

// verifyStream reads the whole events stream and checks that message i is
// line i, so the log holds every event exactly once and in order.
func verifyStream(ctx context.Context, url string, lines [][]byte) error {
	bo := stream.DefaultBusOptions()
	bo.URL, bo.Name = url, "crashloop-verify"
	b, err := stream.Connect(ctx, bo)
	if err != nil {
		return err
	}
	defer b.Close()
	cons, err := b.JetStream().OrderedConsumer(ctx, bo.Stream, jetstream.OrderedConsumerConfig{})
	if err != nil {
		return fmt.Errorf("read back: %w", err)
	}
	it, err := cons.Messages(jetstream.PullMaxMessages(5000))
	if err != nil {
		return fmt.Errorf("read back: %w", err)
	}
	defer it.Stop()
	for i := range lines {
		m, err := it.Next()
		if err != nil {
			return fmt.Errorf("read back message %d: %w", i+1, err)
		}
		md, err := m.Metadata()
		if err != nil {
			return err
		}
		if md.Sequence.Stream != uint64(i+1) || !bytes.Equal(m.Data(), lines[i]) {
			return fmt.Errorf("stream message %d (seq %d) is %q, want event %d %q", i+1, md.Sequence.Stream, m.Data(), i+1, lines[i])
		}
	}
	return nil
}

// --- processes ---

type stats struct {
	Applied    uint64 `json:"events_applied"`
	Rejected   uint64 `json:"events_rejected"`
	LastSeq    uint64 `json:"last_sequence"`
	StreamLast uint64 `json:"stream_last_sequence"`
	Items      int    `json:"items"`
	Sessions   int    `json:"sessions_active"`
}

type serve struct {
	last stats // the last stats read by waitAppliedOrExit
	cmd  *exec.Cmd
	http string
	nats string
	done chan struct{}
	log  *os.File
}

var client = &http.Client{Timeout: 10 * time.Second}

func freePorts(n int) ([]int, error) {
	var ls []net.Listener
	defer func() {
		for _, l := range ls {
			l.Close()
		}
	}()
	var ports []int
	for range n {
		l, err := net.Listen("tcp", "127.0.0.1:0")
		if err != nil {
			return nil, err
		}
		ls = append(ls, l)
		ports = append(ports, l.Addr().(*net.TCPAddr).Port)
	}
	return ports, nil
}

// startServe starts serve on dir with the embedded bus and waits until
// /healthz answers.
func startServe(ctx context.Context, bin, dir string, ports []int, logPath string) (*serve, error) {
	lf, err := os.Create(logPath)
	if err != nil {
		return nil, err
	}
	s := &serve{
		http: fmt.Sprintf("http://127.0.0.1:%d", ports[0]),
		nats: fmt.Sprintf("nats://127.0.0.1:%d", ports[1]),
		done: make(chan struct{}),
		log:  lf,
	}
	s.cmd = exec.Command(bin, "serve", "--data", dir,
		"--http", fmt.Sprintf("127.0.0.1:%d", ports[0]),
		"--nats-listen", fmt.Sprintf("127.0.0.1:%d", ports[1]),
		"--log-level", "warn")
	s.cmd.Args = append(s.cmd.Args, serveArgs...)
	s.cmd.Stdout, s.cmd.Stderr = lf, lf
	if err := s.cmd.Start(); err != nil {
		lf.Close()
		return nil, err
	}
	go func() { _ = s.cmd.Wait(); close(s.done) }()
	deadline := time.Now().Add(2 * time.Minute)
	for time.Now().Before(deadline) {
		select {
		case <-s.done:
			return nil, fmt.Errorf("serve exited at start (log %s)", logPath)
		case <-ctx.Done():
			s.kill()
			return nil, ctx.Err()
		default:
		}
		if _, err := s.get(ctx, "/healthz"); err == nil {
			return s, nil
		}
		time.Sleep(5 * time.Millisecond)
	}
	s.kill()
	return nil, fmt.Errorf("serve not healthy after 2m (log %s)", logPath)
}

// kill sends SIGKILL and waits until the process is gone.
func (s *serve) kill() {
	_ = s.cmd.Process.Signal(syscall.SIGKILL)
	<-s.done
	s.log.Close()
}

// stop sends SIGTERM (graceful shutdown) and waits, killing after 60 s.
func (s *serve) stop() {
	_ = s.cmd.Process.Signal(syscall.SIGTERM)
	select {
	case <-s.done:
	case <-time.After(60 * time.Second):
		_ = s.cmd.Process.Signal(syscall.SIGKILL)
		<-s.done
	}
	s.log.Close()
}

func (s *serve) get(ctx context.Context, path string) ([]byte, error) {
	req, err := http.NewRequestWithContext(ctx, http.MethodGet, s.http+path, nil)
	if err != nil {
		return nil, err
	}
	return do(req)
}

func (s *serve) post(ctx context.Context, path string, body []byte) ([]byte, error) {
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, s.http+path, bytes.NewReader(body))
	if err != nil {
		return nil, err
	}
	req.Header.Set("Content-Type", "application/json")
	return do(req)
}

func do(req *http.Request) ([]byte, error) {
	resp, err := client.Do(req)
	if err != nil {
		return nil, err
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		return nil, err
	}
	if resp.StatusCode != http.StatusOK {
		return b, fmt.Errorf("%s %s: %s: %s", req.Method, req.URL.Path, resp.Status, trim(b))
	}
	return b, nil
}

func (s *serve) stats(ctx context.Context) (stats, error) {
	var st stats
	b, err := s.get(ctx, "/v1/stats")
	if err != nil {
		return st, err
	}
	return st, json.Unmarshal(b, &st)
}

// waitApplied polls /v1/stats until events_applied reaches n.
func (s *serve) waitApplied(ctx context.Context, n uint64, every time.Duration) error {
	for {
		if st, err := s.stats(ctx); err == nil && st.Applied >= n {
			return nil
		}
		select {
		case <-s.done:
			return errors.New("serve exited while ingesting (see its log)")
		case <-ctx.Done():
			return fmt.Errorf("waiting for %d applied: %w", n, ctx.Err())
		case <-time.After(every):
		}
	}
}

// sender is a running `waymark send`.
type sender struct {
	cmd  *exec.Cmd
	done chan error
	out  *bytes.Buffer
}

func startSender(ctx context.Context, bin, url string, lines [][]byte, path string) (*sender, error) {
	f, err := os.Create(path)
	if err != nil {
		return nil, err
	}
	w := bufio.NewWriterSize(f, 1<<20)
	for _, l := range lines {
		w.Write(l)
		w.WriteByte('\n')
	}
	if err := errors.Join(w.Flush(), f.Close()); err != nil {
		return nil, err
	}
	s := &sender{cmd: exec.Command(bin, "send", "--quiet", "--nats", url, path), done: make(chan error, 1), out: new(bytes.Buffer)}
	s.cmd.Stdout, s.cmd.Stderr = s.out, s.out
	if err := s.cmd.Start(); err != nil {
		return nil, err
	}
	go func() { s.done <- s.cmd.Wait() }()
	return s, nil
}

func (s *sender) running() bool {
	select {
	case err := <-s.done:
		s.done <- err
		return false
	default:
		return true
	}
}

func (s *sender) kill() {
	_ = s.cmd.Process.Signal(syscall.SIGKILL)
	err := <-s.done
	s.done <- err
}

func (s *sender) wait(ctx context.Context) error {
	select {
	case err := <-s.done:
		s.done <- err
		if err != nil {
			return fmt.Errorf("waymark send: %v: %s", err, trim(s.out.Bytes()))
		}
		return nil
	case <-ctx.Done():
		s.kill()
		return ctx.Err()
	}
}

// generated is the synthetic stream of c: its events, each as a JSON line,
// and its distinct items in order.
func generated(c config) (evs []stream.Event, lines [][]byte, names []string) {
	evs = synth.Generate(synth.Options{Events: c.events, Items: c.items, Seed: c.seed, Concurrent: 200})
	lines = make([][]byte, len(evs))
	set := map[string]bool{}
	for i := range evs {
		lines[i] = evs[i].AppendJSON(nil)
		set[evs[i].Item] = true
	}
	names = make([]string, 0, len(set))
	for it := range set {
		names = append(names, it)
	}
	slices.Sort(names)
	return evs, lines, names
}
