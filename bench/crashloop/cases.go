package main

import (
	"bufio"
	"bytes"
	"context"
	"errors"
	"fmt"
	"io/fs"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"waymark/store"
	"waymark/stream"
)

// The fault cases besides the kill loop (issue 12). Each prints what it
// did, what the issue promises for it, and what happened, and returns an
// error when the promise is broken.
//
//   - idflood: every event has a new session id and a new item id (a
//     crawler, a bot, an id-format change upstream), sent to serve at its
//     default flags. Promised: every event applied, no flush exceeds what
//     one store transaction holds, and the state survives a kill -9 and a
//     restart. Found on 8dbccd9: serve exits with "flush at seq N: store:
//     flush too large for one transaction", and so does every restart.
//   - corrupt-sst: 64 KiB of random bytes written over the middle of the
//     largest .sst file of a stopped service's store.
//   - truncate-sst: the largest .sst file cut to half its size.
//   - delete-checkpoint: the store's checkpoint key (x/checkpoint, see
//     store/FORMAT.md) deleted.
//
// For the three damage cases the promise is the same: serve verifies what
// it loads and either refuses to start (or to become ready) with a clear
// one-line error, or rebuilds from the stream (which still holds every
// event here) and says so in its log; it never panics and never serves
// answers that differ from those it gave before the damage.

var damageCases = map[string]func(dir string, rng *rand.Rand) (string, error){
	"corrupt-sst":       overwriteSST,
	"truncate-sst":      truncateSST,
	"delete-checkpoint": deleteCheckpoint,
}

// caseNames lists every case in the order "all" runs them.
var caseNames = []string{"kills", "idflood", "corrupt-sst", "truncate-sst", "delete-checkpoint"}

// floodLines returns n events each with a new session and a new item id,
// one millisecond apart.
func floodLines(n int) [][]byte {
	lines := make([][]byte, n)
	ts := int64(1767225600000)
	for i := range lines {
		id := strconv.Itoa(i)
		ev := stream.Event{Session: "flood-s" + id, Item: "flood-i" + id, TS: ts + int64(i)}
		lines[i] = ev.AppendJSON(nil)
	}
	return lines
}

// floodRun sends the id flood to serve at default flags and checks that it
// learns all of it, then that a kill -9 and a restart keep it.
func floodRun(ctx context.Context, c config) error {
	n := uint64(c.events)
	flags := "default flags"
	if len(serveArgs) > 0 {
		flags = "default flags and " + strings.Join(serveArgs, " ")
	}
	fmt.Printf("idflood: %d events, each a new session and a new item, serve at %s\n", n, flags)
	fmt.Println("idflood: promised: every event applied, no flush larger than a store transaction, the state kept across kill -9")
	dir := filepath.Join(c.dir, "idflood")
	ports, err := freePorts(2)
	if err != nil {
		return err
	}
	logPath := dir + ".0.log"
	srv, err := startServe(ctx, c.bin, dir, ports, logPath)
	if err != nil {
		return err
	}
	snd, err := startSender(ctx, c.bin, srv.nats, floodLines(c.events), filepath.Join(c.dir, "flood.ndjson"))
	if err != nil {
		srv.kill()
		return err
	}
	start := time.Now()
	out, err := srv.waitAppliedOrExit(ctx, n)
	if err != nil {
		srv.kill()
		snd.kill()
		return err
	}
	if out == stalled {
		st := lastStats(srv)
		srv.kill()
		snd.kill()
		fmt.Printf("idflood: LOST EVENTS: the consumer is at the stream's end (seq %d, stream %d) with %d of %d applied, %d rejected, for %s; log: %s\n",
			st.LastSeq, st.StreamLast, st.Applied, n, st.Rejected, stallAfter, failureLine(logPath))
		return fmt.Errorf("idflood: %d events never applied", n-st.Applied)
	}
	if out == exited {
		snd.kill()
		srv.kill() // already gone: this reaps it and closes its log
		st := lastStats(srv)
		fmt.Printf("idflood: serve EXITED after %.1fs with %d applied: %s\n", time.Since(start).Seconds(), st.Applied, failureLine(logPath))
		// The same folder again: a crash loop dies the same way.
		logPath = dir + ".1.log"
		srv2, err := startServe(ctx, c.bin, dir, ports, logPath)
		if err != nil {
			fmt.Printf("idflood: the restart exited at start: %s\n", failureLine(logPath))
			return errors.New("idflood: serve died on the flood and does not come back")
		}
		out, err := srv2.waitAppliedOrExit(ctx, n)
		if err != nil {
			srv2.kill()
			return err
		}
		if out == exited {
			srv2.kill()
			fmt.Printf("idflood: the restart EXITED too (%d applied): %s\n", lastStats(srv2).Applied, failureLine(logPath))
			return errors.New("idflood: crash loop: serve dies on the flood and on every restart")
		}
		srv2.stop()
		return errors.New("idflood: serve died on the flood (the restart then got through)")
	}
	if err := snd.wait(ctx); err != nil {
		srv.kill()
		return err
	}
	before, err := srv.stats(ctx)
	if err != nil {
		srv.kill()
		return err
	}
	fmt.Printf("idflood: %d applied, %d items, %d sessions in %.1fs\n", before.Applied, before.Items, before.Sessions, time.Since(start).Seconds())
	probe := []string{"flood-i0", "flood-i" + strconv.Itoa(c.events/2), "flood-i" + strconv.Itoa(c.events-1)}
	ansBefore, err := answers(ctx, srv, probe, nil)
	if err != nil {
		srv.kill()
		return err
	}
	srv.kill()
	logPath = dir + ".1.log"
	srv, err = startServe(ctx, c.bin, dir, ports, logPath)
	if err != nil {
		return fmt.Errorf("idflood: the restart after kill -9: %w: %s", err, failureLine(logPath))
	}
	defer srv.stop()
	if out, err := srv.waitAppliedOrExit(ctx, n); err != nil || out != reached {
		return fmt.Errorf("idflood: after kill -9 the restart did not reach %d applied (%v): %s", n, err, failureLine(logPath))
	}
	after, _ := srv.stats(ctx)
	ansAfter, err := answers(ctx, srv, probe, nil)
	if err != nil {
		return err
	}
	var problems []string
	if before.Applied != n || after.Applied != n {
		problems = append(problems, fmt.Sprintf("events_applied %d before the kill, %d after; want %d", before.Applied, after.Applied, n))
	}
	if before.Items != after.Items || before.Items != c.events {
		problems = append(problems, fmt.Sprintf("items %d before the kill, %d after; want %d", before.Items, after.Items, c.events))
	}
	problems = append(problems, compare(ansAfter, ansBefore, "after kill -9", "before      ")...)
	if len(problems) > 0 {
		for _, p := range problems {
			fmt.Println("  DIFF", p)
		}
		return fmt.Errorf("idflood: %d problems", len(problems))
	}
	fmt.Println("idflood: PASS (every event applied; the same state after kill -9 and restart)")
	return nil
}

// damageRun learns a generated stream, stops serve cleanly, damages the
// store as the case says, starts serve again and reports what it did.
func damageRun(ctx context.Context, c config, name string) error {
	damage := damageCases[name]
	n := uint64(c.events)
	evs, lines, names := generated(c)
	probe := scoreProbe(evs, c.scores, c.seed)
	fmt.Printf("%s: %d events, %d items\n", name, n, len(names))
	fmt.Printf("%s: promised: refuse with a one-line error, or rebuild from the stream and say so; never a panic, never wrong answers\n", name)
	dir := filepath.Join(c.dir, name)
	ports, err := freePorts(2)
	if err != nil {
		return err
	}
	srv, err := startServe(ctx, c.bin, dir, ports, dir+".0.log")
	if err != nil {
		return err
	}
	snd, err := startSender(ctx, c.bin, srv.nats, lines, filepath.Join(c.dir, name+".ndjson"))
	if err != nil {
		srv.kill()
		return err
	}
	if err := snd.wait(ctx); err != nil {
		srv.kill()
		return err
	}
	if err := srv.waitApplied(ctx, n, 20*time.Millisecond); err != nil {
		srv.kill()
		return err
	}
	want, err := answers(ctx, srv, names, probe)
	if err != nil {
		srv.kill()
		return err
	}
	srv.stop() // a clean stop: Badger writes its memtable into .sst files
	what, err := damage(filepath.Join(dir, "store"), rand.New(rand.NewPCG(c.seed, 0xda)))
	if err != nil {
		return fmt.Errorf("%s: damage: %w", name, err)
	}
	fmt.Printf("%s: damage: %s\n", name, what)

	logPath := dir + ".1.log"
	srv, err = startServe(ctx, c.bin, dir, ports, logPath)
	if err != nil {
		line := failureLine(logPath)
		if isPanic(logPath) {
			return fmt.Errorf("%s: serve PANICKED at start: %s", name, line)
		}
		fmt.Printf("%s: PASS: serve refused to start: %s\n", name, line)
		return nil
	}
	defer srv.stop()
	// Let it settle: ready and caught up with the stream, or not ready
	// for good, or dead.
	var st stats
	ready, why := false, ""
	deadline := time.Now().Add(60 * time.Second)
	for time.Now().Before(deadline) {
		select {
		case <-srv.done:
			if isPanic(logPath) {
				return fmt.Errorf("%s: serve PANICKED after start: %s", name, failureLine(logPath))
			}
			fmt.Printf("%s: PASS: serve stopped after start: %s\n", name, failureLine(logPath))
			return nil
		default:
		}
		b, rerr := srv.get(ctx, "/readyz")
		ready, why = rerr == nil, strings.TrimSpace(string(b))
		st, _ = srv.stats(ctx)
		if ready && st.StreamLast > 0 && st.LastSeq == st.StreamLast {
			break
		}
		time.Sleep(100 * time.Millisecond)
	}
	if !ready {
		fmt.Printf("%s: PASS: serve runs but refuses readiness: %s\n", name, trim([]byte(why)))
		return nil
	}
	got, err := answers(ctx, srv, names, probe)
	if err != nil {
		return err
	}
	diffs := compare(got, want, "after the damage ", "before the damage")
	said := logMentions(logPath, "rebuil", "corrupt", "damage", "checksum", "mismatch")
	fmt.Printf("%s: serve became ready: %d applied (%d before the damage), %d of %d answers differ; log: %s\n",
		name, st.Applied, n, len(diffs), len(want), said)
	if len(diffs) > 0 {
		for _, d := range diffs[:min(len(diffs), 5)] {
			fmt.Println("  DIFF", d)
		}
		return fmt.Errorf("%s: SILENT CORRUPTION: ready, and %d answers differ from before the damage", name, len(diffs))
	}
	if st.Applied != n {
		return fmt.Errorf("%s: ready with events_applied %d, want %d", name, st.Applied, n)
	}
	if said == "" {
		return fmt.Errorf("%s: UNDETECTED: ready with the same answers, and nothing in the log says the damage was seen", name)
	}
	fmt.Printf("%s: PASS: rebuilt or repaired, answers as before the damage\n", name)
	return nil
}

// largestSST returns the largest .sst file under dir.
func largestSST(dir string) (string, int64, error) {
	var best string
	var size int64
	err := filepath.WalkDir(dir, func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() || !strings.HasSuffix(p, ".sst") {
			return err
		}
		fi, err := d.Info()
		if err == nil && fi.Size() > size {
			best, size = p, fi.Size()
		}
		return err
	})
	if err == nil && best == "" {
		err = fmt.Errorf("no .sst file under %s", dir)
	}
	return best, size, err
}

func overwriteSST(dir string, rng *rand.Rand) (string, error) {
	p, size, err := largestSST(dir)
	if err != nil {
		return "", err
	}
	n := int64(64 << 10)
	if size < 2*n {
		n = size / 2 // a small store: the middle half
	}
	off := size/2 - n/2
	junk := make([]byte, n)
	for i := range junk {
		junk[i] = byte(rng.UintN(256))
	}
	f, err := os.OpenFile(p, os.O_WRONLY, 0)
	if err != nil {
		return "", err
	}
	if _, err := f.WriteAt(junk, off); err != nil {
		f.Close()
		return "", err
	}
	return fmt.Sprintf("%d random bytes written at offset %d of %s (%d bytes)", n, off, filepath.Base(p), size), f.Close()
}

func truncateSST(dir string, _ *rand.Rand) (string, error) {
	p, size, err := largestSST(dir)
	if err != nil {
		return "", err
	}
	return fmt.Sprintf("%s cut from %d to %d bytes", filepath.Base(p), size, size/2), os.Truncate(p, size/2)
}

// deleteCheckpoint deletes the checkpoint key, store/FORMAT.md's
// x/checkpoint, through the store package as serve would write it.
func deleteCheckpoint(dir string, _ *rand.Rand) (string, error) {
	st, err := store.Open(context.Background(), dir, store.DefaultOptions())
	if err != nil {
		return "", err
	}
	cp, err := st.Checkpoint()
	if err != nil {
		st.Close()
		return "", err
	}
	if err := st.Commit(func(tx *store.Txn) error { return tx.Delete([]byte("x/checkpoint")) }); err != nil {
		st.Close()
		return "", err
	}
	return fmt.Sprintf("x/checkpoint deleted (it held seq %d, %d applied)", cp.Seq, cp.Applied), st.Close()
}

// outcome is how waiting for n applied events ended.
type outcome int

const (
	reached outcome = iota // events_applied reached n
	exited                 // serve exited
	stalled                // the consumer is at the stream's end and the count stopped short
)

// stallAfter is how long events_applied may stay short of n, with the
// consumer at the stream's last sequence, before the events are counted as
// lost.
const stallAfter = 30 * time.Second

// waitAppliedOrExit polls until events_applied reaches n, serve exits, or
// the count stalls short of n with nothing left in the stream to deliver.
func (s *serve) waitAppliedOrExit(ctx context.Context, n uint64) (outcome, error) {
	var since time.Time
	for {
		if st, err := s.stats(ctx); err == nil {
			if st != s.last {
				since = time.Time{}
			}
			s.last = st
			if st.Applied >= n {
				return reached, nil
			}
			if st.StreamLast > 0 && st.LastSeq == st.StreamLast {
				if since.IsZero() {
					since = time.Now()
				} else if time.Since(since) > stallAfter {
					return stalled, nil
				}
			}
		}
		select {
		case <-s.done:
			return exited, nil
		case <-ctx.Done():
			return reached, fmt.Errorf("waiting for %d applied: %w", n, ctx.Err())
		case <-time.After(50 * time.Millisecond):
		}
	}
}

// lastStats returns the last stats read from a serve that has exited.
func lastStats(s *serve) stats { return s.last }

// failureLine returns the line of a serve log that says why it stopped:
// the first panic line, else the last line at ERROR level or naming an
// error, else the last line.
func failureLine(path string) string {
	b, err := os.ReadFile(path)
	if err != nil {
		return "(no log: " + err.Error() + ")"
	}
	var last, errLine string
	sc := bufio.NewScanner(bytes.NewReader(b))
	sc.Buffer(make([]byte, 1<<20), 1<<20)
	for sc.Scan() {
		l := strings.TrimSpace(sc.Text())
		if l == "" {
			continue
		}
		if strings.HasPrefix(l, "panic:") {
			return trim([]byte(l))
		}
		last = l
		if strings.Contains(l, "level=ERROR") || strings.Contains(l, "error") || strings.Contains(l, "err=") {
			errLine = l
		}
	}
	if errLine != "" {
		return trim([]byte(errLine))
	}
	return trim([]byte(last))
}

func isPanic(path string) bool {
	b, _ := os.ReadFile(path)
	return bytes.Contains(b, []byte("\npanic:")) || bytes.HasPrefix(b, []byte("panic:")) || bytes.Contains(b, []byte("goroutine 1 ["))
}

// logMentions returns the first log line containing one of the words
// (case-insensitive), or "".
func logMentions(path string, words ...string) string {
	b, _ := os.ReadFile(path)
	for _, l := range strings.Split(string(b), "\n") {
		low := strings.ToLower(l)
		for _, w := range words {
			if strings.Contains(low, w) {
				return trim([]byte(l))
			}
		}
	}
	return ""
}
