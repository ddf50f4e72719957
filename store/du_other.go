//go:build !unix

package store

import (
	"fmt"
	"io/fs"
	"path/filepath"
)

// diskUsage sums the lengths of the regular files under dir: without
// st_blocks, Badger's sparse reservations count at their full length.
func diskUsage(dir string) (int64, error) {
	var n int64
	err := filepath.WalkDir(dir, func(path string, d fs.DirEntry, err error) error {
		if err != nil {
			if path != dir {
				return nil
			}
			return err
		}
		if fi, err := d.Info(); err == nil && d.Type().IsRegular() {
			n += fi.Size()
		}
		return nil
	})
	if err != nil {
		return n, fmt.Errorf("store size of %s: %w", dir, err)
	}
	return n, nil
}
