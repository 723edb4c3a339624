//go:build unix

package layers

import (
	"os"
	"syscall"
)

// mapFile maps the first size bytes of f read-only. The mapping outlives f's
// descriptor and its name.
func mapFile(f *os.File, size int64) ([]byte, func() error, error) {
	if size == 0 {
		return nil, func() error { return nil }, nil
	}
	data, err := syscall.Mmap(int(f.Fd()), 0, int(size), syscall.PROT_READ, syscall.MAP_SHARED)
	if err != nil {
		return nil, nil, err
	}
	return data, func() error { return syscall.Munmap(data) }, nil
}

// releaseMapping drops the pages of a read-only file mapping from the
// process's resident set; they stay in the page cache, and the next read
// maps them again without reading the disk. Concurrent readers are safe: the
// file does not change.
func releaseMapping(data []byte) {
	if len(data) > 0 {
		syscall.Madvise(data, syscall.MADV_DONTNEED)
	}
}
