//go:build !unix

package storedir

// RemoveEmptyMemtables does nothing where flock is not available: a store
// left with an empty memtable file by a kill needs the file removed by hand.
func RemoveEmptyMemtables(string) {}
