//go:build unix

package store

import (
	"io/fs"
	"syscall"
)

// allocated is the blocks allocated to a file. The apparent length would
// count Badger's sparse reservations (memtable logs and value-log files are
// truncated to their full size when created) as if they were written.
func allocated(fi fs.FileInfo) int64 {
	if st, ok := fi.Sys().(*syscall.Stat_t); ok {
		return int64(st.Blocks) * 512 // st_blocks is in 512-byte units on every Unix
	}
	return fi.Size()
}
