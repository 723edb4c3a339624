//go:build !linux

package storedir

// On systems other than Linux the store leaves its mapped files' pages to
// the kernel.

func canPageOut() bool                 { return false }
func residentFileBytes() (int64, bool) { return 0, false }
func pageOutMappings(string)           {}
