package store

import (
	"fmt"
	"io/fs"
	"path/filepath"
)

// diskUsage sums what the regular files under dir take on disk, each as
// allocated says (du_unix.go, du_other.go).
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
		if fi, err := d.Info(); err == nil {
			n += allocated(fi)
		}
		return nil
	})
	if err != nil {
		return n, fmt.Errorf("store size of %s: %w", dir, err)
	}
	return n, nil
}
