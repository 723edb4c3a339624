package layers

import (
	"encoding/binary"
	"fmt"
	"math/rand/v2"
	"sort"
	"testing"
)

// TestSortedTableSearch compares search, with its fence keys of several
// spacings and with hints good, bad and absent, with a plain binary search
// over a table of repeated keys (as node ids repeat over their versions).
func TestSortedTableSearch(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	const n, recLen = 5000, 16
	data := make([]byte, 0, n*recLen)
	var keys []int64
	k := int64(-50)
	for range n {
		k += int64(rng.IntN(3)) // steps of 0 (a repeat), 1 and 2
		keys = append(keys, k)
		data = binary.LittleEndian.AppendUint64(data, uint64(k))
		data = binary.LittleEndian.AppendUint64(data, 0)
	}
	for _, every := range []int{1, 7, 512, n + 1} {
		t.Run(fmt.Sprintf("fence every %d", every), func(t *testing.T) {
			tab := &sortedTable{data: data, n: n, recLen: recLen}
			tab.buildFence(every)
			for want := keys[0] - 2; want <= keys[n-1]+2; want++ {
				exp := sort.Search(n, func(i int) bool { return keys[i] >= want })
				for _, hint := range []int{-1, n, exp, max(exp-1, 0), min(exp+1, n-1), rng.IntN(n)} {
					if got := tab.search(want, hint); got != exp {
						t.Fatalf("search(%d, hint %d) = %d, want %d", want, hint, got, exp)
					}
				}
			}
		})
	}
}
