package storedir

import (
	"sync"
	"time"
)

// DefaultMappedResident is how many bytes of the store's memory-mapped files
// may stay in the process's resident set before the store hands them back
// to the kernel (ingest's Options.WithMappedResident).
const DefaultMappedResident = 256 << 20

// residentEvery is how often the store looks at its resident set.
const residentEvery = 200 * time.Millisecond

// Keeper keeps the pages of the store's memory-mapped files (Badger
// maps its tables, value log and memtable logs) out of the process's
// resident set once they exceed a limit: every residentEvery it reads how
// much of the process's resident set is file pages and, above the limit,
// asks the kernel to reclaim the pages of the mappings of files in the
// store's folder (pageOutMappings; Linux only, elsewhere it does nothing).
// The files do not change by this: clean pages are dropped and read again
// from the file when next used, dirty ones are written back first or kept.
type Keeper struct {
	stop chan struct{}
	wg   sync.WaitGroup
}

// StartKeeper starts the keeper for the store in dir; limit <= 0 or dir ""
// (an in-memory store) starts nothing. The caller calls Close when the store
// closes.
func StartKeeper(dir string, limit int64) *Keeper {
	k := &Keeper{stop: make(chan struct{})}
	if dir == "" || limit <= 0 || !canPageOut() {
		return k
	}
	k.wg.Go(func() {
		t := time.NewTicker(residentEvery)
		defer t.Stop()
		for {
			select {
			case <-k.stop:
				return
			case <-t.C:
				if n, ok := residentFileBytes(); ok && n > limit {
					pageOutMappings(dir)
				}
			}
		}
	})
	return k
}

// Close stops the keeper and waits for it; a nil Keeper does nothing, and
// Close may be called more than once.
func (k *Keeper) Close() {
	if k == nil {
		return
	}
	select {
	case <-k.stop:
	default:
		close(k.stop)
	}
	k.wg.Wait()
}
