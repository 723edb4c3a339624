package ingest

import (
	"errors"
	"strings"
	"testing"

	"github.com/dgraph-io/badger/v4"
)

func TestOpenRefusesNewerSchema(t *testing.T) {
	dir := t.TempDir()
	s, err := Open(dir, DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	err = s.db.Update(func(txn *badger.Txn) error { return txn.Set(metaKey(metaSchema), []byte("99")) })
	if err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	_, err = Open(dir, DefaultOptions())
	if !errors.Is(err, ErrSchemaNewer) {
		t.Fatalf("open: %v, want ErrSchemaNewer", err)
	}
	if msg := err.Error(); !strings.Contains(msg, "schema 99") || !strings.Contains(msg, dir) {
		t.Errorf("message %q", msg)
	}
	// the refused store was closed again: a new open meets no lock
	if _, err := Open(dir, DefaultOptions()); errors.Is(err, ErrLocked) {
		t.Error("refused store left locked")
	}
}

func TestOpenRefusesForeignDatabase(t *testing.T) {
	dir := t.TempDir()
	db, err := badger.Open(DefaultOptions().badger(dir))
	if err != nil {
		t.Fatal(err)
	}
	if err := db.Update(func(txn *badger.Txn) error { return txn.Set([]byte("x"), []byte("y")) }); err != nil {
		t.Fatal(err)
	}
	db.Close()
	if _, err := Open(dir, DefaultOptions()); !errors.Is(err, ErrFormat) || !strings.Contains(err.Error(), "not a loadwake store") {
		t.Errorf("open: %v", err)
	}
}
