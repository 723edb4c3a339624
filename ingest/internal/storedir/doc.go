// Package storedir is the operating-system care of an ingest store's folder,
// apart from Badger itself: StartKeeper bounds how much of the folder's
// memory-mapped files stays in the process's resident set (MADV_PAGEOUT of
// the mappings, Linux only), and RemoveEmptyMemtables clears the zero-length
// memtable files a kill can leave (unix only, under Badger's folder lock);
// elsewhere both do nothing and neither changes what the files hold. Foreign
// finds the files in a folder that no store made, so that Open refuses a
// folder of other data without writing into it.
package storedir
