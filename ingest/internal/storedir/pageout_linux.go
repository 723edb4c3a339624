package storedir

import (
	"bufio"
	"bytes"
	"os"
	"path/filepath"
	"strconv"
	"syscall"
)

// madvPageout is Linux's MADV_PAGEOUT (include/uapi/asm-generic/mman-common.h,
// since Linux 5.4): reclaim the given pages now. Unlike MADV_DONTNEED it never
// discards data: a page that cannot be reclaimed stays, anonymous memory is
// swapped or left alone. So a range that was unmapped and reused between
// reading /proc/self/maps and the call comes to no harm either.
const madvPageout = 21

// canPageOut reports whether the kernel's memory maps can be read.
func canPageOut() bool {
	_, err := os.Stat("/proc/self/maps")
	return err == nil
}

// residentFileBytes returns the file-backed part of the process's resident
// set (RssFile in /proc/self/status).
func residentFileBytes() (int64, bool) {
	b, err := os.ReadFile("/proc/self/status")
	if err != nil {
		return 0, false
	}
	for line := range bytes.Lines(b) {
		rest, ok := bytes.CutPrefix(line, []byte("RssFile:"))
		if !ok {
			continue
		}
		f := bytes.Fields(rest)
		if len(f) == 0 {
			return 0, false
		}
		kb, err := strconv.ParseInt(string(f[0]), 10, 64)
		if err != nil {
			return 0, false
		}
		return kb << 10, true
	}
	return 0, false
}

// pageOutMappings asks the kernel to reclaim the resident pages of every
// mapping of a file in dir (/proc/self/maps lines "START-END PERMS OFFSET DEV
// INODE PATH"). Errors are ignored: a mapping gone meanwhile has no pages.
func pageOutMappings(dir string) {
	abs, err := filepath.Abs(dir)
	if err != nil {
		return
	}
	f, err := os.Open("/proc/self/maps")
	if err != nil {
		return
	}
	defer f.Close()
	want := []byte(abs + string(filepath.Separator))
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		line := sc.Bytes()
		i := bytes.IndexByte(line, '/')
		if i < 0 || !bytes.HasPrefix(line[i:], want) {
			continue
		}
		span, _, _ := bytes.Cut(line, []byte(" "))
		lo, hi, ok := bytes.Cut(span, []byte("-"))
		if !ok {
			continue
		}
		start, err1 := strconv.ParseUint(string(lo), 16, 64)
		end, err2 := strconv.ParseUint(string(hi), 16, 64)
		if err1 != nil || err2 != nil || end <= start {
			continue
		}
		syscall.Syscall(syscall.SYS_MADVISE, uintptr(start), uintptr(end-start), madvPageout)
	}
}
