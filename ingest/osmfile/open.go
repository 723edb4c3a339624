package osmfile

import (
	"bufio"
	"bytes"
	"compress/bzip2"
	"compress/gzip"
	"context"
	"encoding/binary"
	"encoding/xml"
	"errors"
	"fmt"
	"io"
	"os"
	"runtime"
	"sync/atomic"
	"time"

	"github.com/paulmach/osm"
)

// ReadOptions tune a Reader. The zero value is ready to use.
type ReadOptions struct {
	// Procs is how many goroutines decode PBF blocks in parallel;
	// 0 means runtime.GOMAXPROCS(0). XML formats decode on one goroutine.
	Procs int
}

func (o ReadOptions) procs() int {
	if o.Procs > 0 {
		return o.Procs
	}
	return runtime.GOMAXPROCS(0)
}

// Compression is the container a file is wrapped in, detected from its magic bytes.
type Compression uint8

// The compressions loadwake reads.
const (
	CompressionNone  Compression = iota
	CompressionGzip              // 1f 8b
	CompressionBzip2             // "BZh"
)

// String returns a short name of the compression.
func (c Compression) String() string {
	switch c {
	case CompressionGzip:
		return "gzip"
	case CompressionBzip2:
		return "bzip2"
	}
	return "none"
}

// detectPeek is how much decompressed content detection may look at. The
// first object or changeset element of an XML file is expected within it.
const detectPeek = 64 << 10

// OpenFile opens the file at path and returns a Reader for its content. The
// compression (gzip, bzip2 or none) is detected from the file's magic bytes and
// the format from the first bytes of the decompressed content, never from the
// name. Close closes the file. Errors about the content are *ParseError values
// naming path and unwrapping to ErrUnknown, ErrFormat or ErrOrder.
//
// The readers check what the store relies on: every object has a positive
// version and a timestamp (a PBF written without metadata fails), consecutive
// versions of one object increase strictly, visible nodes have a location in
// [-90, 90] x [-180, 180] (see Locations in the package doc), and changesets
// have an id, a created_at and a bounding box in that range. A missing visible attribute or PBF visible field means visible;
// objects of an OsmChange delete block are not visible, of create and modify
// blocks visible.
func OpenFile(ctx context.Context, path string, opts ReadOptions) (Reader, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("ingest: open %s: %w", path, err)
	}
	r, err := OpenReader(ctx, path, f, opts)
	if err != nil {
		f.Close()
		return nil, err
	}
	r.(closeHooker).addCloser(f)
	return r, nil
}

// OpenReader returns a Reader for the already-open stream r, detecting compression and
// format as OpenFile does; name is used in error messages. Close releases the
// decoders but leaves r open.
func OpenReader(ctx context.Context, name string, r io.Reader, opts ReadOptions) (Reader, error) {
	if ctx == nil {
		ctx = context.Background()
	}
	cr := &countingReader{r: r}
	src, comp, err := decompress(name, cr)
	if err != nil {
		return nil, err
	}
	br := bufio.NewReaderSize(src, detectPeek)
	format, err := detectFormat(br)
	if err != nil {
		if errors.Is(err, ErrUnknown) {
			return nil, &ParseError{File: name, Err: err}
		}
		return nil, &ParseError{File: name, Err: fmt.Errorf("%w: reading %s content: %w", ErrFormat, comp, err)}
	}
	base := readerBase{name: name, format: format, counter: cr}
	switch format {
	case FormatPBF:
		return newPBFReader(ctx, base, br, opts), nil
	default:
		return newXMLReader(ctx, base, br), nil
	}
}

// DetectFile reports the compression and format of the file at path without
// reading more than its first blocks.
func DetectFile(path string) (Compression, Format, error) {
	f, err := os.Open(path)
	if err != nil {
		return CompressionNone, FormatUnknown, fmt.Errorf("ingest: open %s: %w", path, err)
	}
	defer f.Close()
	src, comp, err := decompress(path, f)
	if err != nil {
		return CompressionNone, FormatUnknown, err
	}
	format, err := detectFormat(bufio.NewReaderSize(src, detectPeek))
	if err != nil {
		if errors.Is(err, ErrUnknown) {
			return comp, FormatUnknown, &ParseError{File: path, Err: err}
		}
		return comp, FormatUnknown, &ParseError{File: path, Err: fmt.Errorf("%w: reading %s content: %w", ErrFormat, comp, err)}
	}
	return comp, format, nil
}

// decompress looks at the magic bytes of r and returns a reader of the
// decompressed content.
func decompress(name string, r io.Reader) (io.Reader, Compression, error) {
	br := bufio.NewReader(r)
	magic, err := br.Peek(3)
	if err != nil && !errors.Is(err, io.EOF) {
		return nil, CompressionNone, fmt.Errorf("ingest: read %s: %w", name, err)
	}
	switch {
	case len(magic) >= 2 && magic[0] == 0x1f && magic[1] == 0x8b:
		zr, err := gzip.NewReader(br)
		if err != nil {
			return nil, CompressionGzip, &ParseError{File: name, Err: fmt.Errorf("%w: gzip header: %w", ErrFormat, err)}
		}
		return zr, CompressionGzip, nil
	case len(magic) == 3 && string(magic) == "BZh":
		return bzip2.NewReader(br), CompressionBzip2, nil
	}
	return br, CompressionNone, nil
}

// detectFormat peeks at the decompressed content. It returns an error wrapping
// ErrUnknown when the content is none of the formats, and the read error when
// the content cannot be read (a broken compressed stream).
func detectFormat(br *bufio.Reader) (Format, error) {
	head, err := br.Peek(detectPeek)
	if err != nil && !errors.Is(err, io.EOF) && !errors.Is(err, bufio.ErrBufferFull) && len(head) == 0 {
		return FormatUnknown, err
	}
	// A stream broken after its first bytes (truncated gzip, corrupt bzip2
	// block) is detected from what there is; the bufio.Reader keeps the
	// error and the reader reports it at its position.
	if isPBFHeader(head) {
		return FormatPBF, nil
	}
	if f, ok := xmlFormat(head); ok {
		return f, nil
	}
	if err != nil && !errors.Is(err, io.EOF) && !errors.Is(err, bufio.ErrBufferFull) {
		return FormatUnknown, err // a broken stream, not an unknown format
	}
	if len(head) == 0 {
		return FormatUnknown, fmt.Errorf("%w: empty content", ErrUnknown)
	}
	return FormatUnknown, fmt.Errorf("%w: neither OSM PBF nor OSM XML (<osm> or <osmChange> root)", ErrUnknown)
}

// isPBFHeader reports whether head starts with a PBF file block: a 4-byte
// big-endian BlobHeader length, then a BlobHeader whose field 1 (type) is
// "OSMHeader" (OSM PBF format, wiki.openstreetmap.org/wiki/PBF_Format).
func isPBFHeader(head []byte) bool {
	const typ = "OSMHeader"
	if len(head) < 4+2+len(typ) {
		return false
	}
	n := binary.BigEndian.Uint32(head)
	if n < uint32(2+len(typ)) || n >= 64<<10 {
		return false
	}
	h := head[4:]
	return h[0] == 0x0a && int(h[1]) == len(typ) && string(h[2:2+len(typ)]) == typ
}

// xmlFormat finds the root element of an XML document in head and, for <osm>,
// its first child element that is not <bounds>.
func xmlFormat(head []byte) (Format, bool) {
	d := xml.NewDecoder(bytes.NewReader(head))
	d.Strict = true
	depth := 0
	root := ""
	for {
		tok, err := d.RawToken()
		if err != nil {
			// The head ended (or broke) before a decision: an <osm> root
			// with no object yet is an (empty) OSM XML file; the reader
			// reports any syntax error at its position.
			switch root {
			case "osm":
				return FormatXML, true
			case "osmChange":
				return FormatOsmChange, true
			}
			return FormatUnknown, false
		}
		switch t := tok.(type) {
		case xml.StartElement:
			depth++
			if depth == 1 {
				root = t.Name.Local
				switch root {
				case "osmChange":
					return FormatOsmChange, true
				case "osm":
					continue
				}
				return FormatUnknown, false
			}
			if depth == 2 {
				switch t.Name.Local {
				case "changeset":
					return FormatChangesets, true
				case "node", "way", "relation":
					return FormatXML, true
				}
			}
		case xml.EndElement:
			depth--
			if depth == 0 {
				return FormatXML, true // <osm></osm> with no objects
			}
		case xml.CharData:
			// A UTF-8 byte order mark comes as character data before the root.
			if depth == 0 && len(bytes.TrimSpace(bytes.TrimPrefix(t, []byte("\uFEFF")))) > 0 {
				return FormatUnknown, false
			}
		}
	}
}

// countingReader counts the bytes read from the file, before decompression.
type countingReader struct {
	r io.Reader
	n atomic.Int64
}

func (c *countingReader) Read(p []byte) (int, error) {
	n, err := c.r.Read(p)
	c.n.Add(int64(n))
	return n, err
}

// readerBase holds what every Reader shares.
type readerBase struct {
	name    string
	format  Format
	counter *countingReader
	closers []io.Closer
}

type closeHooker interface{ addCloser(io.Closer) }

func (b *readerBase) addCloser(c io.Closer) { b.closers = append(b.closers, c) }

// Format returns the detected format.
func (b *readerBase) Format() Format { return b.format }

// BytesRead returns how many bytes of the (compressed) file have been consumed.
func (b *readerBase) BytesRead() int64 { return b.counter.n.Load() }

func (b *readerBase) closeAll() error {
	var errs []error
	for _, c := range b.closers {
		if err := c.Close(); err != nil {
			errs = append(errs, err)
		}
	}
	b.closers = nil
	return errors.Join(errs...)
}

func (b *readerBase) errorf(pos Position, object string, sentinel error, format string, args ...any) *ParseError {
	return &ParseError{File: b.name, Pos: pos, Object: object,
		Err: fmt.Errorf("%w: %s", sentinel, fmt.Sprintf(format, args...))}
}

// objectLabel names an object version as "way/42 v3".
func objectLabel(t string, id int64, version int) string {
	return fmt.Sprintf("%s/%d v%d", t, id, version)
}

// objectLabelOf names an object version as "way/42 v3".
func objectLabelOf(o osm.Object) string {
	typ, id, version, _ := objectKey(o)
	return objectLabel(string(typ), id, version)
}

func objectKey(o osm.Object) (typ osm.Type, id int64, version int, ts time.Time) {
	switch o := o.(type) {
	case *osm.Node:
		return osm.TypeNode, int64(o.ID), o.Version, o.Timestamp
	case *osm.Way:
		return osm.TypeWay, int64(o.ID), o.Version, o.Timestamp
	case *osm.Relation:
		return osm.TypeRelation, int64(o.ID), o.Version, o.Timestamp
	}
	return "", 0, 0, time.Time{}
}

// versionCheck holds the previous object of a file to check that every
// object has a positive version and a timestamp, and that consecutive
// versions of one object increase strictly.
type versionCheck struct {
	typ     osm.Type
	id      int64
	version int
}

// object checks o against the previous object; the error wraps ErrFormat or ErrOrder.
func (c *versionCheck) object(o osm.Object) error {
	typ, id, version, ts := objectKey(o)
	if typ == "" {
		return fmt.Errorf("%w: unexpected object %T", ErrFormat, o)
	}
	if version <= 0 {
		return fmt.Errorf("%w: version must be positive (was the file written without metadata?)", ErrFormat)
	}
	if ts.IsZero() {
		return fmt.Errorf("%w: no timestamp", ErrFormat)
	}
	if c.typ == typ && c.id == id && version <= c.version {
		return fmt.Errorf("%w: version %d follows version %d of the same %s", ErrOrder, version, c.version, typ)
	}
	c.typ, c.id, c.version = typ, id, version
	if n, ok := o.(*osm.Node); ok {
		return checkLocation(n)
	}
	return nil
}
