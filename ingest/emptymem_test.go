package ingest

import (
	"os"
	"path/filepath"
	"testing"
)

// TestOpenAfterKillLeavesEmptyMemtable opens a store in which a kill -9
// landed between Badger creating a memtable's write-ahead file and giving it
// its size: a zero-length NNNNN.mem file, which holds no write. Badger
// refuses such a file ("while opening fid"); Open removes it and opens the
// store, with everything written before intact (seen once in the kill test).
func TestOpenAfterKillLeavesEmptyMemtable(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "db")
	st, err := Open(dir, DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	key := []byte("kept")
	if err := st.PutDerived(t.Context(), func(put func(k, v []byte) error) error { return put(key, []byte("yes")) }); err != nil {
		t.Fatal(err)
	}
	if err := st.Close(); err != nil {
		t.Fatal(err)
	}
	empty := filepath.Join(dir, "00099.mem")
	if err := os.WriteFile(empty, nil, 0o644); err != nil {
		t.Fatal(err)
	}
	st, err = Open(dir, DefaultOptions())
	if err != nil {
		t.Fatalf("open after an empty memtable file: %v", err)
	}
	defer st.Close()
	v, ok, err := st.GetDerived(t.Context(), key)
	if err != nil || !ok || string(v) != "yes" {
		t.Fatalf("derived value after reopen: %q %v %v", v, ok, err)
	}
}
