package export

import (
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"time"

	"github.com/parquet-go/parquet-go"
)

// ErrStoreID is returned (wrapped) when a store id cannot be part of a file name.
var ErrStoreID = errors.New("export: bad store id")

// storeIDPattern is what a store id may hold: it goes into file names.
var storeIDPattern = regexp.MustCompile(`^[A-Za-z0-9][A-Za-z0-9_.]*$`)

// Options tune an export. Store is required.
type Options struct {
	// Store names the store in every row and file name: letters, digits,
	// '_' and '.', starting with a letter or digit (a region's name, say).
	Store string
	// RowsPerFile starts a new file in a month after this many rows; 0 means
	// 1,000,000.
	RowsPerFile int64
	// MaxOpen is how many month files may be open at once; 0 means 8. Events
	// come in time order (one open file); changesets in id order, nearly.
	MaxOpen int
	// Now gives the manifest's time; nil means time.Now.
	Now func() time.Time
}

func (o Options) rowsPerFile() int64 {
	if o.RowsPerFile > 0 {
		return o.RowsPerFile
	}
	return 1_000_000
}

func (o Options) maxOpen() int {
	if o.MaxOpen > 0 {
		return o.MaxOpen
	}
	return 8
}

func (o Options) validate() error {
	if !storeIDPattern.MatchString(o.Store) {
		return fmt.Errorf("%w %q: use letters, digits, '_' and '.', starting with a letter or digit", ErrStoreID, o.Store)
	}
	return nil
}

// File is one written Parquet file.
type File struct {
	Path  string `json:"path"` // relative to the dataset folder, slash-separated
	Month string `json:"month"`
	Rows  int64  `json:"rows"`
}

// Manifest is what an export wrote; it is stored as _loadwake-STORE.json in
// the dataset folder once every file is in place.
type Manifest struct {
	Store     string    `json:"store"`
	Kind      string    `json:"kind"` // "events" or "changesets"
	Rows      int64     `json:"rows"`
	Files     []File    `json:"files"`
	Completed time.Time `json:"completed"`
}

// ManifestName is the manifest file's name of a store's export.
func ManifestName(store string) string { return "_loadwake-" + store + ".json" }

// bufferRows is how many rows a part collects before handing them to the
// Parquet writer.
const bufferRows = 1024

// part is one open Parquet file.
type part[T any] struct {
	file       File
	tmp, final string
	f          *os.File
	w          *parquet.GenericWriter[T]
	buf        []T
}

func (p *part[T]) flush() error {
	if len(p.buf) == 0 {
		return nil
	}
	if _, err := p.w.Write(p.buf); err != nil {
		return err
	}
	p.buf = p.buf[:0]
	return nil
}

func (p *part[T]) close() error {
	err := p.flush()
	if cerr := p.w.Close(); err == nil {
		err = cerr
	}
	if cerr := p.f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return fmt.Errorf("export: write %s: %w", p.tmp, err)
	}
	return nil
}

// dataset writes rows of type T into month partitions under temporary names
// and puts them in place in commit.
type dataset[T any] struct {
	dir, kind string
	opts      Options
	open      []*part[T] // least recently used first
	next      map[string]int
	closed    []*part[T]
	rows      int64
}

func newDataset[T any](dir, kind string, opts Options) (*dataset[T], error) {
	if err := opts.validate(); err != nil {
		return nil, err
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("export: %w", err)
	}
	return &dataset[T]{dir: dir, kind: kind, opts: opts, next: map[string]int{}}, nil
}

// write adds one row to the month's open file, opening one as needed.
func (d *dataset[T]) write(month string, row T) error {
	p, err := d.part(month)
	if err != nil {
		return err
	}
	p.buf = append(p.buf, row)
	p.file.Rows++
	d.rows++
	if len(p.buf) >= bufferRows {
		if err := p.flush(); err != nil {
			return fmt.Errorf("export: write %s: %w", p.tmp, err)
		}
	}
	if p.file.Rows >= d.opts.rowsPerFile() {
		return d.closePart(p)
	}
	return nil
}

func (d *dataset[T]) part(month string) (*part[T], error) {
	for i, p := range d.open {
		if p.file.Month == month {
			if i != len(d.open)-1 { // most recently used last
				d.open = append(append(d.open[:i:i], d.open[i+1:]...), p)
			}
			return p, nil
		}
	}
	if len(d.open) >= d.opts.maxOpen() {
		if err := d.closePart(d.open[0]); err != nil {
			return nil, err
		}
	}
	sub := filepath.Join(d.dir, "month="+month)
	if err := os.MkdirAll(sub, 0o755); err != nil {
		return nil, fmt.Errorf("export: %w", err)
	}
	n := d.next[month]
	d.next[month] = n + 1
	name := fmt.Sprintf("part-%s-%05d.parquet", d.opts.Store, n)
	p := &part[T]{
		file:  File{Path: "month=" + month + "/" + name, Month: month},
		tmp:   filepath.Join(sub, "."+name+".tmp"),
		final: filepath.Join(sub, name),
	}
	f, err := os.Create(p.tmp)
	if err != nil {
		return nil, fmt.Errorf("export: %w", err)
	}
	p.f = f
	p.w = parquet.NewGenericWriter[T](f, parquet.Compression(&parquet.Zstd))
	d.open = append(d.open, p)
	return p, nil
}

func (d *dataset[T]) closePart(p *part[T]) error {
	d.open = slices.DeleteFunc(d.open, func(q *part[T]) bool { return q == p })
	d.closed = append(d.closed, p)
	return p.close()
}

// abort closes and removes every temporary file.
func (d *dataset[T]) abort() {
	for _, p := range d.open {
		p.w.Close()
		p.f.Close()
		d.closed = append(d.closed, p)
	}
	d.open = nil
	for _, p := range d.closed {
		os.Remove(p.tmp)
	}
}

// commit closes the open files, renames every temporary file to its name,
// removes this store's files an earlier export left that this one did not
// write, and writes the manifest last.
func (d *dataset[T]) commit() (Manifest, error) {
	for len(d.open) > 0 {
		if err := d.closePart(d.open[0]); err != nil {
			d.abort()
			return Manifest{}, err
		}
	}
	manifest := filepath.Join(d.dir, ManifestName(d.opts.Store))
	if err := os.Remove(manifest); err != nil && !errors.Is(err, os.ErrNotExist) {
		d.abort()
		return Manifest{}, fmt.Errorf("export: %w", err)
	}
	m := Manifest{Store: d.opts.Store, Kind: d.kind, Rows: d.rows, Files: []File{}}
	keep := map[string]bool{}
	for _, p := range d.closed {
		if err := os.Rename(p.tmp, p.final); err != nil {
			d.abort()
			return Manifest{}, fmt.Errorf("export: %w", err)
		}
		keep[p.final] = true
		m.Files = append(m.Files, p.file)
	}
	if err := d.removeStale(keep); err != nil {
		return Manifest{}, err
	}
	slices.SortFunc(m.Files, func(a, b File) int { return strings.Compare(a.Path, b.Path) })
	now := time.Now
	if d.opts.Now != nil {
		now = d.opts.Now
	}
	m.Completed = now().UTC()
	b, err := json.MarshalIndent(m, "", "  ")
	if err != nil {
		return Manifest{}, fmt.Errorf("export: manifest: %w", err)
	}
	tmp := manifest + ".tmp"
	if err := os.WriteFile(tmp, append(b, '\n'), 0o644); err != nil {
		return Manifest{}, fmt.Errorf("export: manifest: %w", err)
	}
	if err := os.Rename(tmp, manifest); err != nil {
		return Manifest{}, fmt.Errorf("export: manifest: %w", err)
	}
	return m, nil
}

// removeStale removes this store's Parquet files that are not in keep.
func (d *dataset[T]) removeStale(keep map[string]bool) error {
	own := regexp.MustCompile(`^part-` + regexp.QuoteMeta(d.opts.Store) + `-[0-9]{5}\.parquet$`)
	months, err := filepath.Glob(filepath.Join(d.dir, "month=*"))
	if err != nil {
		return fmt.Errorf("export: %w", err)
	}
	for _, m := range months {
		entries, err := os.ReadDir(m)
		if err != nil {
			return fmt.Errorf("export: %w", err)
		}
		for _, e := range entries {
			path := filepath.Join(m, e.Name())
			if own.MatchString(e.Name()) && !keep[path] {
				if err := os.Remove(path); err != nil {
					return fmt.Errorf("export: remove stale %s: %w", path, err)
				}
			}
		}
	}
	return nil
}
