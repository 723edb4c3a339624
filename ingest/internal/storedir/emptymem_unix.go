//go:build unix

package storedir

import (
	"os"
	"path/filepath"
	"syscall"
)

// RemoveEmptyMemtables removes the zero-length memtable files (NNNNN.mem) of
// the store in dir. A kill between Badger creating a memtable's write-ahead
// file and giving it its size leaves such a file; it holds no write, but
// Badger refuses to open a store with one ("while opening fid"). It acts only
// while it holds the lock Badger takes on the folder (flock), so it never
// touches the files of a store another process has open; any failure leaves
// the folder as it was, and Badger's own open reports the problem.
func RemoveEmptyMemtables(dir string) {
	d, err := os.Open(dir)
	if err != nil {
		return // no store yet
	}
	defer d.Close()
	if syscall.Flock(int(d.Fd()), syscall.LOCK_EX|syscall.LOCK_NB) != nil {
		return // held by another process: Badger's open says so
	}
	defer syscall.Flock(int(d.Fd()), syscall.LOCK_UN)
	paths, _ := filepath.Glob(filepath.Join(dir, "*.mem"))
	for _, p := range paths {
		if fi, err := os.Lstat(p); err == nil && fi.Mode().IsRegular() && fi.Size() == 0 {
			os.Remove(p)
		}
	}
}
