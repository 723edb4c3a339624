//go:build !unix

package layers

import (
	"io"
	"os"
)

// mapFile reads the first size bytes of f into memory: without mmap the table
// costs its full size in memory.
func mapFile(f *os.File, size int64) ([]byte, func() error, error) {
	data := make([]byte, size)
	if _, err := f.ReadAt(data, 0); err != nil && err != io.EOF {
		return nil, nil, err
	}
	return data, func() error { return nil }, nil
}

// releaseMapping does nothing: the table is ordinary memory.
func releaseMapping([]byte) {}
