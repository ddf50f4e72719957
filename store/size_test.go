//go:build unix

package store

import (
	"context"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
)

// TestSizeIsOnDisk: waymark_store_size_bytes and Size report the blocks the
// store's files take on disk, not Badger's reserved value-log length (issue
// 12: 2.1 GB reported for a 3 MB store). The expected value is read from
// the file system (st_blocks of every file in the folder, what du counts).
func TestSizeIsOnDisk(t *testing.T) {
	dir := t.TempDir()
	reg := prometheus.NewPedanticRegistry()
	o := DefaultOptions()
	o.MemoryBudget, o.Registerer = MinMemoryBudget, reg
	st, err := Open(context.Background(), dir, o)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	// 12 MiB in 1 MiB transactions: more than the 8 MiB memtable of the
	// smallest budget, so a table is written beside the logs.
	// Random values: Badger compresses tables, and zeros would shrink to
	// nothing.
	rng := rand.New(rand.NewPCG(1, 2))
	val := make([]byte, 4096)
	for b := 0; b < 12; b++ {
		if err := st.Commit(func(tx *Txn) error {
			for i := 0; i < 256; i++ {
				for j := range val {
					val[j] = byte(rng.Uint32())
				}
				if err := tx.Set(fmt.Appendf(nil, "k/%02d/%03d", b, i), val); err != nil {
					return err
				}
			}
			return nil
		}); err != nil {
			t.Fatal(err)
		}
	}
	onDisk := func() (blocks, apparent int64) {
		ents, err := os.ReadDir(dir)
		if err != nil {
			t.Fatal(err)
		}
		for _, e := range ents {
			fi, err := os.Stat(filepath.Join(dir, e.Name()))
			if err != nil || !fi.Mode().IsRegular() {
				continue
			}
			blocks += fi.Sys().(*syscall.Stat_t).Blocks * 512
			apparent += fi.Size()
		}
		return blocks, apparent
	}
	// Badger writes the table in the background: poll until the metric
	// and the folder agree.
	var want, apparent int64
	deadline := time.Now().Add(20 * time.Second)
	for {
		want, apparent = onDisk()
		exp := fmt.Sprintf("# HELP waymark_store_size_bytes Bytes the store's files take on disk (allocated blocks, as du counts them).\n# TYPE waymark_store_size_bytes gauge\nwaymark_store_size_bytes %d\n", want)
		err := testutil.GatherAndCompare(reg, strings.NewReader(exp), "waymark_store_size_bytes")
		if err == nil && st.Size() == want {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("store size: Size() %d, folder %d bytes on disk (%d apparent): %v", st.Size(), want, apparent, err)
		}
		time.Sleep(50 * time.Millisecond)
	}
	// The folder holds at least a memtable's worth of what was written (in
	// its log or in a table), and the sparse reservations (the value log's
	// twice ValueLogFileSize, each memtable log's twice MemTableSize) make
	// the apparent length larger by more than one value-log file.
	sz, _ := o.Sizing()
	if want < sz.MemTableSize || apparent-want < sz.ValueLogFileSize {
		t.Errorf("on disk %d bytes, apparent %d, value-log file %d: the test no longer separates them", want, apparent, sz.ValueLogFileSize)
	}
}
