package storedir

import (
	"errors"
	"io/fs"
	"os"
	"strings"
)

// badgerFile reports whether a folder entry is one Badger makes (LOCK comes
// first, then MANIFEST).
func badgerFile(name string) bool {
	switch name {
	case "MANIFEST", "LOCK", "KEYREGISTRY", "DISCARD":
		return true
	}
	return strings.HasSuffix(name, ".sst") || strings.HasSuffix(name, ".vlog") || strings.HasSuffix(name, ".mem")
}

// Foreign looks in dir for files no store made: it returns the first three
// of their names and how many there are in all. A missing or empty folder,
// or one holding a Badger manifest (which a store has from its first open
// on), has none. ours names the store's own files beside Badger's. The error
// is one of reading the folder.
func Foreign(dir string, ours func(name string) bool) (names []string, others int, err error) {
	entries, err := os.ReadDir(dir)
	if errors.Is(err, fs.ErrNotExist) {
		return nil, 0, nil
	}
	if err != nil {
		return nil, 0, err
	}
	for _, e := range entries {
		if e.Name() == "MANIFEST" && e.Type().IsRegular() {
			return nil, 0, nil
		}
		if badgerFile(e.Name()) || ours(e.Name()) {
			continue
		}
		if others++; len(names) < 3 {
			names = append(names, e.Name())
		}
	}
	return names, others, nil
}
