// Package storedir is the operating-system care of an ingest store's folder,
// apart from Badger itself: StartKeeper bounds how much of the folder's
// memory-mapped files stays in the process's resident set (MADV_PAGEOUT of
// the mappings, Linux only), and RemoveEmptyMemtables clears the zero-length
// memtable files a kill can leave (unix only, under Badger's folder lock).
// Elsewhere both do nothing. Neither changes what the files hold.
package storedir
