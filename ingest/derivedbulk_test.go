package ingest

import (
	"context"
	"encoding/binary"
	"fmt"
	"math/rand/v2"
	"path/filepath"
	"testing"
)

// TestPutDerivedSorted writes records in shuffled order, some keys twice,
// through the sorted bulk write with a sort buffer small enough to spill more
// runs than one merge reads (so runs are merged in rounds), and requires the
// store to hold every key once with its last value, in key order: on a fresh
// disk store (the StreamWriter), on one whose memtable holds writes (write
// batches instead) and in memory.
func TestPutDerivedSorted(t *testing.T) {
	const n = 20000
	keys := make([][]byte, n)
	for i := range keys {
		keys[i] = binary.BigEndian.AppendUint32([]byte("t|"), uint32(i))
	}
	rng := rand.New(rand.NewPCG(1, 2))
	order := rng.Perm(n)
	for _, c := range []struct {
		name       string
		disk       bool
		writeFirst bool // a transactional write first, so the memtable holds data
		streamed   bool
	}{
		{"fresh disk store", true, false, true},
		{"memtable holds writes", true, true, false},
		{"in memory", false, false, false},
	} {
		t.Run(c.name, func(t *testing.T) {
			ctx := context.Background()
			var st *Store
			var err error
			if c.disk {
				// Opened twice: a new store's first open writes its schema
				// record, which stays in the memtable until the store closes.
				dir := filepath.Join(t.TempDir(), "store")
				if st, err = Open(dir, DefaultOptions()); err == nil {
					if err = st.Close(); err == nil {
						st, err = Open(dir, DefaultOptions())
					}
				}
			} else {
				st, err = OpenInMemory(DefaultOptions())
			}
			if err != nil {
				t.Fatal(err)
			}
			defer st.Close()
			if c.writeFirst {
				err := st.PutDerived(ctx, func(put func(k, v []byte) error) error { return put([]byte("other"), []byte("x")) })
				if err != nil {
					t.Fatal(err)
				}
			}
			streamed, err := st.putDerivedSorted(ctx, t.TempDir(), 4<<10, func(put func(k, v []byte) error) error {
				for _, i := range order {
					if err := put(keys[i], []byte(fmt.Sprint("first ", i))); err != nil {
						return err
					}
					if i%7 == 0 {
						if err := put(keys[i], []byte(fmt.Sprint("last ", i))); err != nil {
							return err
						}
					}
				}
				return nil
			})
			if err != nil {
				t.Fatal(err)
			}
			if streamed != c.streamed {
				t.Errorf("streamed = %v, want %v", streamed, c.streamed)
			}
			i := 0
			err = st.ScanDerived(ctx, []byte("t|"), func(k, v []byte) error {
				want := fmt.Sprint("first ", i)
				if i%7 == 0 {
					want = fmt.Sprint("last ", i)
				}
				if i >= n || string(k) != string(keys[i]) || string(v) != want {
					return fmt.Errorf("record %d: %q = %q, want %q = %q", i, k, v, keys[min(i, n-1)], want)
				}
				i++
				return nil
			})
			if err != nil {
				t.Fatal(err)
			}
			if i != n {
				t.Errorf("%d records, want %d", i, n)
			}
			if v, ok, err := st.GetDerived(ctx, []byte("t|\x00\x00\x00\x07")); err != nil || !ok || string(v) != "last 7" {
				t.Errorf("GetDerived = %q, %v, %v", v, ok, err)
			}
		})
	}
}
