package store

import (
	"fmt"
	"os"
	"path/filepath"

	"github.com/dgraph-io/badger/v4"
	"github.com/dgraph-io/badger/v4/options"
	"github.com/dgraph-io/badger/v4/table"
	"github.com/dgraph-io/ristretto/v2/z"
)

// verifyTables checks every table's checksums before Badger opens them.
// Badger cannot be trusted with a damaged table: it opens tables on
// goroutines of its own, where a truncated one panics out of reach of any
// recover, and it skips a table whose checksum fails ("Ignoring table"),
// which silently drops the keys in it. Here each table is opened with
// Badger's own reader, on this goroutine, and a panic or a failed checksum
// is ErrCorrupt naming the file.
func verifyTables(dir string, bo badger.Options) error {
	ssts, err := filepath.Glob(filepath.Join(dir, "*.sst"))
	if err != nil {
		return err
	}
	pool := z.NewAllocatorPool(1)
	defer pool.Release()
	for _, p := range ssts {
		if err := verifyTable(p, bo, pool); err != nil {
			return fmt.Errorf("%w: table %s: %s", ErrCorrupt, filepath.Base(p), firstLine(err.Error()))
		}
	}
	return nil
}

func verifyTable(path string, bo badger.Options, pool *z.AllocatorPool) (err error) {
	defer func() {
		if p := recover(); p != nil {
			err = fmt.Errorf("unreadable: %v", p)
		}
	}()
	mf, err := z.OpenMmapFile(path, os.O_RDONLY, 0)
	if err != nil && mf == nil {
		return err
	}
	t, err := table.OpenTable(mf, table.Options{
		ReadOnly:             true,
		BlockSize:            bo.BlockSize,
		BloomFalsePositive:   bo.BloomFalsePositive,
		ChkMode:              options.OnTableRead,
		Compression:          bo.Compression,
		ZSTDCompressionLevel: bo.ZSTDCompressionLevel,
		AllocPool:            pool,
	})
	if err != nil {
		return err
	}
	return t.Close(-1)
}
