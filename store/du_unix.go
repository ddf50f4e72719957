//go:build unix

package store

import (
	"fmt"
	"io/fs"
	"path/filepath"
	"syscall"
)

// diskUsage sums the blocks allocated to the regular files under dir. The
// apparent length would count Badger's sparse reservations (memtable logs
// and value-log files are truncated to their full size when created) as
// if they were written.
func diskUsage(dir string) (int64, error) {
	var n int64
	err := filepath.WalkDir(dir, func(path string, d fs.DirEntry, err error) error {
		if err != nil {
			// A table compacted away between listing and stat is gone,
			// not an error.
			if path != dir {
				return nil
			}
			return err
		}
		if !d.Type().IsRegular() {
			return nil
		}
		fi, err := d.Info()
		if err != nil {
			return nil
		}
		if st, ok := fi.Sys().(*syscall.Stat_t); ok {
			n += int64(st.Blocks) * 512 // st_blocks is in 512-byte units on every Unix
		} else {
			n += fi.Size()
		}
		return nil
	})
	if err != nil {
		return n, fmt.Errorf("store size of %s: %w", dir, err)
	}
	return n, nil
}
