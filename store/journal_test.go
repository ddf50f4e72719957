package store

import (
	"context"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"strings"
	"syscall"
	"testing"
)

// smallOptions gives an 8 MiB memtable, about the smallest Badger opens
// with its default 1 MiB value threshold: the transaction limit is then
// 15 % of it, 1.26 MB and 13,107 entries (badger/v4 db.go:
// maxBatchSize = 15 % of MemTableSize, maxBatchCount = maxBatchSize /
// skl.MaxNodeSize), so 15,000 writes need two
// transactions.
func smallOptions() Options {
	o := DefaultOptions()
	o.MemTableSize = 8 << 20
	return o
}

const journalKeys = 15_000

// stateBatch is the flush of state v: keys k/0..n-1 set to "v<v>-<i>",
// keys of the previous state above n deleted, and a checkpoint at seq v.
func stateBatch(t testing.TB, v, n int) *Batch {
	b := new(Batch)
	for i := range n {
		_ = b.Set([]byte(fmt.Sprintf("k/%06d", i)), []byte(fmt.Sprintf("v%d-%d", v, i)))
	}
	for i := n; i < journalKeys; i++ {
		_ = b.Delete([]byte(fmt.Sprintf("k/%06d", i)))
	}
	if err := PutCheckpoint(b, Checkpoint{Seq: uint64(v), Applied: uint64(n)}); err != nil {
		t.Fatal(err)
	}
	return b
}

// readState returns the checkpoint and every k/ key, and fails on any
// journal key left behind.
func readState(t *testing.T, st *Store) (Checkpoint, map[string]string) {
	t.Helper()
	cp, err := st.Checkpoint()
	if err != nil {
		t.Fatal(err)
	}
	kv := map[string]string{}
	err = st.Scan(context.Background(), nil, func(k, v []byte) error {
		switch {
		case strings.HasPrefix(string(k), "k/"):
			kv[string(k)] = string(v)
		case strings.HasPrefix(string(k), "j/") || string(k) == string(journalKey):
			return fmt.Errorf("journal key %q left after open", k)
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return cp, kv
}

// checkState fails unless the store holds exactly state v of n keys.
func checkState(t *testing.T, cp Checkpoint, kv map[string]string, v, n int) {
	t.Helper()
	if cp.Seq != uint64(v) || cp.Applied != uint64(n) || len(kv) != n {
		t.Fatalf("checkpoint seq %d applied %d with %d keys; want state %d of %d keys", cp.Seq, cp.Applied, len(kv), v, n)
	}
	for i := range n {
		k := fmt.Sprintf("k/%06d", i)
		if want := fmt.Sprintf("v%d-%d", v, i); kv[k] != want {
			t.Fatalf("%s = %q, want %q (a state between two flushes)", k, kv[k], want)
		}
	}
}

// TestBatchOverTxnLimit: a batch far over one transaction's limits (the
// flood of new ids of issue 12 that made serve exit with "flush too large
// for one transaction") commits, and reads back exactly, deletes included.
// On the code before the journal, CommitBatch returned ErrTooLarge here.
func TestBatchOverTxnLimit(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	st, err := Open(ctx, dir, smallOptions())
	if err != nil {
		t.Fatal(err)
	}
	if n := st.DB().MaxBatchCount(); n >= journalKeys {
		t.Fatalf("transaction holds %d entries: the test would not cross the limit", n)
	}
	if err := st.CommitBatch(stateBatch(t, 1, journalKeys)); err != nil {
		t.Fatal(err)
	}
	if err := st.CommitBatch(stateBatch(t, 2, journalKeys/2)); err != nil {
		t.Fatal(err)
	}
	if err := st.Close(); err != nil {
		t.Fatal(err)
	}
	st, err = Open(ctx, dir, smallOptions())
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	cp, kv := readState(t, st)
	checkState(t, cp, kv, 2, journalKeys/2)
}

// TestJournalKill9: a process is killed with SIGKILL after each stage of
// a multi-transaction flush; the next Open must find exactly the state
// before the flush (killed before its commit point) or exactly the state
// after it, never a mix. The child is this test binary, re-run.
func TestJournalKill9(t *testing.T) {
	if os.Getenv("WAYMARK_JOURNAL_CHILD") != "" {
		journalChild(t)
		return
	}
	// Stages in order (journal.go); "journal" is the first transaction of
	// journal entries, "apply" the first of the applied writes, "clear"
	// the first of the cleared entries.
	cases := []struct {
		stage string
		after bool // the flush is committed when killed here
	}{
		{"journal", false},
		{"journaled", true},
		{"apply", true},
		{"applied", true},
		{"unmarked", true},
		{"clear", true},
	}
	for _, c := range cases {
		t.Run(c.stage, func(t *testing.T) {
			dir := t.TempDir()
			cmd := exec.Command(os.Args[0], "-test.run=^TestJournalKill9$", "-test.count=1")
			cmd.Env = append(os.Environ(), "WAYMARK_JOURNAL_CHILD="+c.stage, "WAYMARK_JOURNAL_DIR="+dir)
			out, err := cmd.CombinedOutput()
			var ee *exec.ExitError
			if !errors.As(err, &ee) || ee.Sys().(syscall.WaitStatus).Signal() != syscall.SIGKILL {
				t.Fatalf("child was not killed at stage %s: %v\n%s", c.stage, err, out)
			}
			st, err := Open(context.Background(), dir, smallOptions())
			if err != nil {
				t.Fatal(err)
			}
			defer st.Close()
			cp, kv := readState(t, st)
			if c.after {
				checkState(t, cp, kv, 2, journalKeys/2)
			} else {
				checkState(t, cp, kv, 1, journalKeys)
			}
		})
	}
}

// journalChild commits state 1, then kills itself with SIGKILL at the
// named stage of committing state 2.
func journalChild(t *testing.T) {
	stage, dir := os.Getenv("WAYMARK_JOURNAL_CHILD"), os.Getenv("WAYMARK_JOURNAL_DIR")
	o := smallOptions()
	st, err := Open(context.Background(), dir, o)
	if err != nil {
		t.Fatal(err)
	}
	if err := st.CommitBatch(stateBatch(t, 1, journalKeys)); err != nil {
		t.Fatal(err)
	}
	st.hookFn = func(s string) error {
		if s == stage {
			_ = syscall.Kill(os.Getpid(), syscall.SIGKILL)
			select {}
		}
		return nil
	}
	if err := st.CommitBatch(stateBatch(t, 2, journalKeys/2)); err != nil {
		t.Fatal(err)
	}
	t.Fatalf("stage %q never reached", stage)
}

// TestFailedCommitMidBatch: a flush fails in the middle of its
// transactions (an error after the first of them, injected through the
// test hook where a real disk error would strike). Failed before the
// commit point, the store holds exactly the state before the flush, and
// the next flush commits on a clean journal; failed after it, the flush is
// committed and the next Open completes it.
func TestFailedCommitMidBatch(t *testing.T) {
	ctx := context.Background()
	for _, c := range []struct {
		stage string
		after bool
	}{{"journal", false}, {"apply", true}, {"clear", true}} {
		t.Run(c.stage, func(t *testing.T) {
			dir := t.TempDir()
			st, err := Open(ctx, dir, smallOptions())
			if err != nil {
				t.Fatal(err)
			}
			if err := st.CommitBatch(stateBatch(t, 1, journalKeys)); err != nil {
				t.Fatal(err)
			}
			injected := errors.New("injected failure")
			st.hookFn = func(s string) error {
				if s == c.stage {
					return injected
				}
				return nil
			}
			if err := st.CommitBatch(stateBatch(t, 2, journalKeys/2)); !errors.Is(err, injected) {
				t.Fatalf("commit failing at %s: %v", c.stage, err)
			}
			st.hookFn = nil
			if !c.after {
				cp, kv := readState(t, st)
				checkState(t, cp, kv, 1, journalKeys)
				if err := st.CommitBatch(stateBatch(t, 3, journalKeys/3)); err != nil {
					t.Fatal(err)
				}
			}
			if err := st.Close(); err != nil {
				t.Fatal(err)
			}
			st, err = Open(ctx, dir, smallOptions())
			if err != nil {
				t.Fatal(err)
			}
			defer st.Close()
			cp, kv := readState(t, st)
			if c.after {
				checkState(t, cp, kv, 2, journalKeys/2)
			} else {
				checkState(t, cp, kv, 3, journalKeys/3)
			}
		})
	}
}
