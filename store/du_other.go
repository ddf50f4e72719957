//go:build !unix

package store

import "io/fs"

// allocated is a file's length: without st_blocks, Badger's sparse
// reservations count at their full length.
func allocated(fi fs.FileInfo) int64 { return fi.Size() }
