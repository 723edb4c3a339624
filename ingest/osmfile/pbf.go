package osmfile

import (
	"bytes"
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"sync"
	"time"

	"github.com/klauspost/compress/zlib"
	"github.com/klauspost/compress/zstd"
	"github.com/paulmach/osm"
	"google.golang.org/protobuf/encoding/protowire"
)

// The PBF reader decodes OSM PBF (wiki.openstreetmap.org/wiki/PBF_Format,
// osmformat.proto and fileformat.proto) itself, with google.golang.org/protobuf's
// protowire for the wire format and klauspost/compress for zlib and zstd blobs.
//
// Why not github.com/paulmach/osm/osmpbf (v0.8.0), which was checked first:
// its decoder does report Visible for dense nodes (DenseInfo.visible), ways and
// relations (Info.visible, field 6) and keeps every version of a history file,
// so history was not the problem. But it panics on input it does not expect,
// inside its own decoding goroutines where no caller can recover: a
// PrimitiveGroup with plain (non-dense) nodes is a deliberate
// panic("nodes are not supported"), and string table indexes, way node arrays
// and relation member arrays are indexed without bounds checks. A corrupt block
// would crash the program, and loadwake must answer bad input with an error.
// Its read errors also lose the byte offset of the failing block. This reader
// checks every index and length, reads plain nodes too, and reports errors as
// *ParseError with the byte offset of the block. The tests compare its output
// object by object with osmpbf's on a real extract.
//
// Blocks are decompressed and decoded by Procs goroutines in parallel and
// handed out in file order.

const (
	maxBlobHeaderSize = 64 << 10 // fileformat.proto: BlobHeader "should be less than 32 KiB and must be less than 64 KiB"
	maxBlobSize       = 32 << 20 // fileformat.proto: uncompressed Blob "must be less than 32 MiB"
)

// pbfBlock is one OSMData block travelling from the frame reader through a
// decoder goroutine to Scan.
type pbfBlock struct {
	offset int64  // byte offset of the block's length prefix in the content
	blob   []byte // Blob message
	objs   []osm.Object
	err    error // framing or decoding error, already a *ParseError
	done   chan struct{}
}

type pbfReader struct {
	readerBase
	ctx    context.Context
	cancel context.CancelFunc
	wg     sync.WaitGroup
	order  chan *pbfBlock

	cur      *pbfBlock
	idx      int
	item     Item
	err      error
	closed   bool
	elements int64
	check    versionCheck
}

var _ Reader = (*pbfReader)(nil)

func newPBFReader(ctx context.Context, base readerBase, r io.Reader, opts ReadOptions) *pbfReader {
	ctx, cancel := context.WithCancel(ctx)
	procs := opts.procs()
	pr := &pbfReader{
		readerBase: base,
		ctx:        ctx,
		cancel:     cancel,
		order:      make(chan *pbfBlock, 2*procs),
	}
	work := make(chan *pbfBlock, procs)
	pr.wg.Add(1 + procs)
	go pr.readBlocks(r, work)
	for range procs {
		go func() {
			defer pr.wg.Done()
			var d blockDecoder
			defer d.close()
			for b := range work {
				if b.err == nil {
					b.objs, b.err = d.decode(b.blob)
					if b.err != nil {
						b.err = &ParseError{File: pr.name, Pos: Position{Offset: b.offset},
							Err: fmt.Errorf("%w: PBF data block: %w", ErrFormat, b.err)}
					}
					b.blob = nil
				}
				close(b.done)
			}
		}()
	}
	return pr
}

// readBlocks reads the file blocks in order, checks the header block and
// sends data blocks both to the decoders and, in order, to Scan.
func (pr *pbfReader) readBlocks(r io.Reader, work chan<- *pbfBlock) {
	defer pr.wg.Done()
	defer close(pr.order)
	defer close(work)

	send := func(b *pbfBlock) bool {
		if b.err != nil {
			close(b.done)
		} else {
			select {
			case work <- b:
			case <-pr.ctx.Done():
				return false
			}
		}
		select {
		case pr.order <- b:
			return b.err == nil
		case <-pr.ctx.Done():
			return false
		}
	}
	var offset int64
	for n := 0; ; n++ {
		typ, blob, size, err := readFileBlock(r)
		b := &pbfBlock{offset: offset, blob: blob, done: make(chan struct{})}
		if errors.Is(err, io.EOF) {
			if n == 0 {
				b.err = &ParseError{File: pr.name, Err: fmt.Errorf("%w: PBF without blocks", ErrFormat)}
				send(b)
			}
			return
		}
		if err != nil {
			b.err = &ParseError{File: pr.name, Pos: Position{Offset: offset}, Err: fmt.Errorf("%w: PBF block: %w", ErrFormat, err)}
			send(b)
			return
		}
		offset += size
		switch {
		case n == 0 && typ != "OSMHeader":
			b.err = &ParseError{File: pr.name, Pos: Position{Offset: b.offset},
				Err: fmt.Errorf("%w: first PBF block is %q, want OSMHeader", ErrFormat, typ)}
		case n == 0:
			if err := checkHeaderBlock(blob); err != nil {
				b.err = &ParseError{File: pr.name, Pos: Position{Offset: b.offset},
					Err: fmt.Errorf("%w: PBF header block: %w", ErrFormat, err)}
				send(b)
				return
			}
			continue
		case typ != "OSMData":
			continue // fileformat.proto: readers skip block types they do not know
		}
		if !send(b) {
			return
		}
	}
}

// readFileBlock reads one length-prefixed BlobHeader and its Blob. It returns
// io.EOF only at a clean end between blocks.
func readFileBlock(r io.Reader) (typ string, blob []byte, size int64, err error) {
	var lenBuf [4]byte
	if _, err := io.ReadFull(r, lenBuf[:]); err != nil {
		if errors.Is(err, io.ErrUnexpectedEOF) {
			return "", nil, 0, fmt.Errorf("truncated block length: %w", err)
		}
		return "", nil, 0, err
	}
	hlen := binary.BigEndian.Uint32(lenBuf[:])
	if hlen >= maxBlobHeaderSize {
		return "", nil, 0, fmt.Errorf("BlobHeader of %d bytes, limit %d", hlen, maxBlobHeaderSize)
	}
	hdr := make([]byte, hlen)
	if _, err := io.ReadFull(r, hdr); err != nil {
		return "", nil, 0, fmt.Errorf("truncated BlobHeader: %w", noEOF(err))
	}
	datasize := int64(-1)
	for len(hdr) > 0 {
		var f field
		if f, hdr, err = nextField(hdr); err != nil {
			return "", nil, 0, fmt.Errorf("BlobHeader: %w", err)
		}
		switch {
		case f.num == 1 && f.typ == protowire.BytesType:
			typ = string(f.b)
		case f.num == 3 && f.typ == protowire.VarintType:
			datasize = int64(int32(f.v))
		}
	}
	if datasize < 0 || datasize >= maxBlobSize {
		return "", nil, 0, fmt.Errorf("BlobHeader datasize %d outside 0..%d", datasize, maxBlobSize)
	}
	blob = make([]byte, datasize)
	if _, err := io.ReadFull(r, blob); err != nil {
		return "", nil, 0, fmt.Errorf("truncated Blob of %d bytes: %w", datasize, noEOF(err))
	}
	return typ, blob, 4 + int64(hlen) + datasize, nil
}

func noEOF(err error) error {
	if errors.Is(err, io.EOF) {
		return io.ErrUnexpectedEOF
	}
	return err
}

// pbfFeatures are the required features this reader understands
// (osmformat.proto, HeaderBlock.required_features).
var pbfFeatures = map[string]bool{
	"OsmSchema-V0.6":        true,
	"DenseNodes":            true,
	"HistoricalInformation": true,
}

// checkHeaderBlock decodes the OSMHeader blob and refuses required features
// the reader does not implement.
func checkHeaderBlock(blob []byte) error {
	var d blockDecoder
	data, err := d.blobData(blob)
	if err != nil {
		return err
	}
	for len(data) > 0 {
		var f field
		if f, data, err = nextField(data); err != nil {
			return err
		}
		if f.num == 4 && f.typ == protowire.BytesType && !pbfFeatures[string(f.b)] {
			return fmt.Errorf("required feature %q is not supported", f.b)
		}
	}
	return nil
}

// Scan advances to the next object. It returns false at the end of the file,
// on the first error and once the context is cancelled.
func (pr *pbfReader) Scan() bool {
	if pr.err != nil || pr.closed {
		return false
	}
	// A block holds up to 8000 objects; look at the context within it too.
	if pr.elements%1024 == 1023 {
		if err := pr.ctx.Err(); err != nil {
			pr.err = fmt.Errorf("ingest: reading %s: %w", pr.name, err)
			return false
		}
	}
	for pr.cur == nil || pr.idx >= len(pr.cur.objs) {
		var b *pbfBlock
		var ok bool
		select {
		case b, ok = <-pr.order:
		case <-pr.ctx.Done():
			pr.err = fmt.Errorf("ingest: reading %s: %w", pr.name, pr.ctx.Err())
			return false
		}
		if !ok {
			if err := pr.ctx.Err(); err != nil {
				pr.err = fmt.Errorf("ingest: reading %s: %w", pr.name, err)
			}
			return false
		}
		select {
		case <-b.done:
		case <-pr.ctx.Done():
			pr.err = fmt.Errorf("ingest: reading %s: %w", pr.name, pr.ctx.Err())
			return false
		}
		if b.err != nil {
			var pe *ParseError
			if errors.As(b.err, &pe) {
				pe.Pos.Element = pr.elements
			}
			pr.err = b.err
			return false
		}
		pr.cur, pr.idx = b, 0
	}
	o := pr.cur.objs[pr.idx]
	pr.cur.objs[pr.idx] = nil // the caller owns it now
	pr.idx++
	pr.elements++
	pos := Position{Offset: pr.cur.offset, Element: pr.elements}
	if err := pr.check.object(o); err != nil {
		pr.err = &ParseError{File: pr.name, Pos: pos, Object: objectLabelOf(o), Err: err}
		return false
	}
	pr.item = Item{Object: o, Pos: pos}
	return true
}

// Item returns the current object; it is owned by the caller. Pos.Offset is
// the byte offset of the block holding it.
func (pr *pbfReader) Item() Item { return pr.item }

// Err returns the first error other than end of file.
func (pr *pbfReader) Err() error { return pr.err }

// Close stops the decoders and, for OpenFile, closes the file. Scan returns
// false afterwards.
func (pr *pbfReader) Close() error {
	if pr.closed {
		return nil
	}
	pr.closed = true
	pr.cancel()
	pr.wg.Wait()
	return pr.closeAll()
}

// field is one protobuf field: v holds varint and fixed values, b the bytes of
// length-delimited ones.
type field struct {
	num protowire.Number
	typ protowire.Type
	v   uint64
	b   []byte
}

func nextField(buf []byte) (field, []byte, error) {
	num, typ, n := protowire.ConsumeTag(buf)
	if n < 0 {
		return field{}, nil, protowire.ParseError(n)
	}
	buf = buf[n:]
	f := field{num: num, typ: typ}
	switch typ {
	case protowire.VarintType:
		f.v, n = protowire.ConsumeVarint(buf)
	case protowire.BytesType:
		f.b, n = protowire.ConsumeBytes(buf)
	case protowire.Fixed32Type:
		var v uint32
		v, n = protowire.ConsumeFixed32(buf)
		f.v = uint64(v)
	case protowire.Fixed64Type:
		f.v, n = protowire.ConsumeFixed64(buf)
	default:
		n = protowire.ConsumeFieldValue(num, typ, buf)
	}
	if n < 0 {
		return field{}, nil, fmt.Errorf("field %d: %w", num, protowire.ParseError(n))
	}
	return f, buf[n:], nil
}

// appendVarints appends the values of a repeated varint field, packed or not.
func appendVarints(dst []uint64, f field) ([]uint64, error) {
	switch f.typ {
	case protowire.VarintType:
		return append(dst, f.v), nil
	case protowire.BytesType:
		b := f.b
		for len(b) > 0 {
			v, n := protowire.ConsumeVarint(b)
			if n < 0 {
				return dst, fmt.Errorf("packed field %d: %w", f.num, protowire.ParseError(n))
			}
			dst = append(dst, v)
			b = b[n:]
		}
		return dst, nil
	}
	return dst, fmt.Errorf("field %d: wire type %d for a repeated varint", f.num, f.typ)
}

// blockDecoder decodes OSMData blobs; one per goroutine, reusing its buffers.
type blockDecoder struct {
	raw  []byte
	zr   io.ReadCloser
	zstd *zstd.Decoder

	// per-block
	st             []string
	granularity    int64
	latOff, lonOff int64
	dateGran       int64
	objs           []osm.Object

	// scratch for packed arrays
	ids, lats, lons, kv                                   []uint64
	vers, times, csets, uids, usids, visibles, keys, vals []uint64
}

// close releases the zstd decoder's goroutines.
func (d *blockDecoder) close() {
	if d.zstd != nil {
		d.zstd.Close()
	}
}

// blobData returns the uncompressed content of a Blob message.
func (d *blockDecoder) blobData(blob []byte) ([]byte, error) {
	var (
		rawSize         int64 = -1
		raw, zlibd, zst []byte
		other           protowire.Number
	)
	for len(blob) > 0 {
		f, rest, err := nextField(blob)
		if err != nil {
			return nil, fmt.Errorf("Blob: %w", err)
		}
		blob = rest
		switch f.num {
		case 1:
			raw = f.b
		case 2:
			rawSize = int64(int32(f.v))
		case 3:
			zlibd = f.b
		case 7:
			zst = f.b
		case 4, 5, 6:
			other = f.num
		}
	}
	switch {
	case raw != nil:
		return raw, nil
	case zlibd != nil || zst != nil:
	case other != 0:
		return nil, fmt.Errorf("blob compression (field %d: lzma, bzip2 or lz4) is not supported", other)
	default:
		return nil, errors.New("empty Blob")
	}
	if rawSize < 0 || rawSize > maxBlobSize {
		return nil, fmt.Errorf("Blob raw_size %d outside 0..%d", rawSize, maxBlobSize)
	}
	var src io.Reader
	if zlibd != nil {
		if d.zr == nil {
			zr, err := zlib.NewReader(bytes.NewReader(zlibd))
			if err != nil {
				return nil, fmt.Errorf("zlib: %w", err)
			}
			d.zr = zr
		} else if err := d.zr.(zlib.Resetter).Reset(bytes.NewReader(zlibd), nil); err != nil {
			return nil, fmt.Errorf("zlib: %w", err)
		}
		src = d.zr
	} else {
		if d.zstd == nil {
			zd, err := zstd.NewReader(nil, zstd.WithDecoderConcurrency(1), zstd.WithDecoderMaxMemory(maxBlobSize))
			if err != nil {
				return nil, fmt.Errorf("zstd: %w", err)
			}
			d.zstd = zd
		}
		if err := d.zstd.Reset(bytes.NewReader(zst)); err != nil {
			return nil, fmt.Errorf("zstd: %w", err)
		}
		src = d.zstd
	}
	if int64(cap(d.raw)) < rawSize+1 {
		d.raw = make([]byte, rawSize+1)
	}
	buf := d.raw[:rawSize+1]
	n, err := io.ReadFull(src, buf)
	switch {
	case err == nil:
		return nil, fmt.Errorf("blob inflates to more than raw_size %d", rawSize)
	case errors.Is(err, io.ErrUnexpectedEOF) || errors.Is(err, io.EOF):
		if int64(n) != rawSize {
			return nil, fmt.Errorf("blob inflates to %d bytes, raw_size says %d", n, rawSize)
		}
	default:
		return nil, fmt.Errorf("inflate blob: %w", err)
	}
	return buf[:n], nil
}

// decode decodes one OSMData Blob into objects.
func (d *blockDecoder) decode(blob []byte) ([]osm.Object, error) {
	data, err := d.blobData(blob)
	if err != nil {
		return nil, err
	}
	d.st = d.st[:0]
	d.granularity, d.latOff, d.lonOff, d.dateGran = 100, 0, 0, 1000 // osmformat.proto defaults
	d.objs = make([]osm.Object, 0, 8000)
	var groups [][]byte
	for len(data) > 0 {
		var f field
		if f, data, err = nextField(data); err != nil {
			return nil, fmt.Errorf("PrimitiveBlock: %w", err)
		}
		switch f.num {
		case 1:
			if err := d.stringTable(f.b); err != nil {
				return nil, err
			}
		case 2:
			groups = append(groups, f.b)
		case 17:
			d.granularity = int64(int32(f.v))
		case 18:
			d.dateGran = int64(int32(f.v))
		case 19:
			d.latOff = int64(f.v)
		case 20:
			d.lonOff = int64(f.v)
		}
	}
	for _, g := range groups {
		if err := d.group(g); err != nil {
			return nil, err
		}
	}
	objs := d.objs
	d.objs = nil
	return objs, nil
}

func (d *blockDecoder) stringTable(b []byte) error {
	for len(b) > 0 {
		f, rest, err := nextField(b)
		if err != nil {
			return fmt.Errorf("StringTable: %w", err)
		}
		b = rest
		if f.num == 1 {
			d.st = append(d.st, string(f.b))
		}
	}
	return nil
}

func (d *blockDecoder) str(i uint64) (string, error) {
	if i >= uint64(len(d.st)) {
		return "", fmt.Errorf("string index %d outside a table of %d", i, len(d.st))
	}
	return d.st[i], nil
}

func (d *blockDecoder) coord(off, v int64) float64 {
	return 1e-9 * float64(off+d.granularity*v)
}

// undefinedNano is libosmium's undefined location, 2147483647 units of 100
// nanodegrees (osmium/osm/location.hpp: undefined_coordinate is the largest
// int32), in nanodegrees.
const undefinedNano = 2147483647 * 100

// undefined reports whether the raw lat and lon of a node are libosmium's
// undefined location, which osmium writes for nodes without one.
func (d *blockDecoder) undefined(lat, lon int64) bool {
	return d.latOff+d.granularity*lat == undefinedNano && d.lonOff+d.granularity*lon == undefinedNano
}

func (d *blockDecoder) when(t int64) time.Time {
	return time.UnixMilli(t * d.dateGran).UTC()
}

func (d *blockDecoder) group(b []byte) error {
	for len(b) > 0 {
		f, rest, err := nextField(b)
		if err != nil {
			return fmt.Errorf("PrimitiveGroup: %w", err)
		}
		b = rest
		if f.typ != protowire.BytesType {
			continue
		}
		switch f.num {
		case 1:
			err = d.node(f.b)
		case 2:
			err = d.dense(f.b)
		case 3:
			err = d.way(f.b)
		case 4:
			err = d.relation(f.b)
		}
		if err != nil {
			return err
		}
	}
	return nil
}

// meta is the common part of the Info message.
type meta struct {
	version   int
	timestamp time.Time
	changeset osm.ChangesetID
	uid       osm.UserID
	user      string
	visible   bool
}

func (d *blockDecoder) info(b []byte) (meta, error) {
	m := meta{visible: true} // osmformat.proto: visible "if not present, assume true"
	for len(b) > 0 {
		f, rest, err := nextField(b)
		if err != nil {
			return m, fmt.Errorf("Info: %w", err)
		}
		b = rest
		switch f.num {
		case 1:
			m.version = int(int32(f.v))
		case 2:
			m.timestamp = d.when(int64(f.v))
		case 3:
			m.changeset = osm.ChangesetID(int64(f.v))
		case 4:
			m.uid = osm.UserID(int32(f.v))
		case 5:
			if m.user, err = d.str(uint64(uint32(f.v))); err != nil {
				return m, fmt.Errorf("Info user: %w", err)
			}
		case 6:
			m.visible = f.v != 0
		}
	}
	return m, nil
}

// tags pairs the keys and vals arrays of a node, way or relation.
func (d *blockDecoder) tags(keys, vals []uint64) (osm.Tags, error) {
	if len(keys) != len(vals) {
		return nil, fmt.Errorf("%d tag keys but %d values", len(keys), len(vals))
	}
	if len(keys) == 0 {
		return nil, nil
	}
	tags := make(osm.Tags, len(keys))
	for i := range keys {
		k, err := d.str(keys[i])
		if err != nil {
			return nil, err
		}
		v, err := d.str(vals[i])
		if err != nil {
			return nil, err
		}
		tags[i] = osm.Tag{Key: k, Value: v}
	}
	return tags, nil
}

func (d *blockDecoder) node(b []byte) error {
	n := &osm.Node{}
	var m meta
	m.visible = true
	var lat, lon int64
	hasLat, hasLon := false, false
	d.keys, d.vals = d.keys[:0], d.vals[:0]
	for len(b) > 0 {
		f, rest, err := nextField(b)
		if err != nil {
			return fmt.Errorf("Node: %w", err)
		}
		b = rest
		switch f.num {
		case 1:
			n.ID = osm.NodeID(protowire.DecodeZigZag(f.v))
		case 2:
			d.keys, err = appendVarints(d.keys, f)
		case 3:
			d.vals, err = appendVarints(d.vals, f)
		case 4:
			m, err = d.info(f.b)
		case 8:
			lat, hasLat = protowire.DecodeZigZag(f.v), true
		case 9:
			lon, hasLon = protowire.DecodeZigZag(f.v), true
		}
		if err != nil {
			return fmt.Errorf("node %d: %w", n.ID, err)
		}
	}
	tags, err := d.tags(d.keys, d.vals)
	if err != nil {
		return fmt.Errorf("node %d: %w", n.ID, err)
	}
	n.Lat, n.Lon, n.Tags = d.coord(d.latOff, lat), d.coord(d.lonOff, lon), tags
	switch {
	case !m.visible:
		n.Lat, n.Lon = 0, 0 // see deletedNode
	case !hasLat || !hasLon || d.undefined(lat, lon):
		n.Lat, n.Lon = math.NaN(), math.NaN() // no location: checkLocation refuses it
	}
	n.Version, n.Timestamp, n.ChangesetID, n.UserID, n.User, n.Visible = m.version, m.timestamp, m.changeset, m.uid, m.user, m.visible
	d.objs = append(d.objs, n)
	return nil
}

// deletedNode: a deleted node version has no location. The OSM API writes
// none, so osm.Node reads 0,0 from XML; osmium writes the undefined location
// of libosmium (2147483647 in units of granularity, 214.7483647 degrees) into
// history PBFs it converts from PBF, and 0,0 into those it converts from XML.
// The reader gives 0,0 for every deleted node version, whatever the file holds.

func (d *blockDecoder) dense(b []byte) error {
	d.ids, d.lats, d.lons, d.kv = d.ids[:0], d.lats[:0], d.lons[:0], d.kv[:0]
	d.vers, d.times, d.csets, d.uids, d.usids, d.visibles = d.vers[:0], d.times[:0], d.csets[:0], d.uids[:0], d.usids[:0], d.visibles[:0]
	for len(b) > 0 {
		f, rest, err := nextField(b)
		if err != nil {
			return fmt.Errorf("DenseNodes: %w", err)
		}
		b = rest
		switch f.num {
		case 1:
			d.ids, err = appendVarints(d.ids, f)
		case 5:
			err = d.denseInfo(f.b)
		case 8:
			d.lats, err = appendVarints(d.lats, f)
		case 9:
			d.lons, err = appendVarints(d.lons, f)
		case 10:
			d.kv, err = appendVarints(d.kv, f)
		}
		if err != nil {
			return fmt.Errorf("DenseNodes: %w", err)
		}
	}
	count := len(d.ids)
	if len(d.lats) != count || len(d.lons) != count {
		return fmt.Errorf("DenseNodes: %d ids, %d lats, %d lons", count, len(d.lats), len(d.lons))
	}
	for _, a := range [][]uint64{d.vers, d.times, d.csets, d.uids, d.usids, d.visibles} {
		if len(a) != 0 && len(a) != count {
			return fmt.Errorf("DenseInfo: an array of %d values for %d nodes", len(a), count)
		}
	}
	var id, lat, lon, ts, cs, uid, usid int64
	kv := d.kv
	for i := range count {
		id += protowire.DecodeZigZag(d.ids[i])
		lat += protowire.DecodeZigZag(d.lats[i])
		lon += protowire.DecodeZigZag(d.lons[i])
		n := &osm.Node{ID: osm.NodeID(id), Lat: d.coord(d.latOff, lat), Lon: d.coord(d.lonOff, lon), Visible: true}
		if len(d.vers) > 0 {
			n.Version = int(int32(d.vers[i]))
		}
		if len(d.times) > 0 {
			ts += protowire.DecodeZigZag(d.times[i])
			n.Timestamp = d.when(ts)
		}
		if len(d.csets) > 0 {
			cs += protowire.DecodeZigZag(d.csets[i])
			n.ChangesetID = osm.ChangesetID(cs)
		}
		if len(d.uids) > 0 {
			uid += protowire.DecodeZigZag(uint64(uint32(d.uids[i])))
			n.UserID = osm.UserID(int32(uid))
		}
		if len(d.usids) > 0 {
			usid += protowire.DecodeZigZag(uint64(uint32(d.usids[i])))
			u, err := d.str(uint64(usid))
			if usid < 0 || err != nil {
				return fmt.Errorf("node %d: user string index %d outside a table of %d", id, usid, len(d.st))
			}
			n.User = u
		}
		switch {
		case len(d.visibles) > 0 && d.visibles[i] == 0:
			n.Visible = false
			n.Lat, n.Lon = 0, 0 // see deletedNode
		case d.undefined(lat, lon):
			n.Lat, n.Lon = math.NaN(), math.NaN() // no location: checkLocation refuses it
		}
		// keys_vals: per node, key/value string index pairs ended by 0;
		// absent when no node in the block has tags.
		if len(d.kv) > 0 {
			for {
				if len(kv) == 0 {
					return fmt.Errorf("node %d: keys_vals ends inside the node", id)
				}
				k := kv[0]
				if k == 0 {
					kv = kv[1:]
					break
				}
				if len(kv) < 2 {
					return fmt.Errorf("node %d: keys_vals ends inside a tag", id)
				}
				key, err := d.str(k)
				if err != nil {
					return fmt.Errorf("node %d: %w", id, err)
				}
				val, err := d.str(kv[1])
				if err != nil {
					return fmt.Errorf("node %d: %w", id, err)
				}
				n.Tags = append(n.Tags, osm.Tag{Key: key, Value: val})
				kv = kv[2:]
			}
		}
		d.objs = append(d.objs, n)
	}
	return nil
}

func (d *blockDecoder) denseInfo(b []byte) error {
	for len(b) > 0 {
		f, rest, err := nextField(b)
		if err != nil {
			return fmt.Errorf("DenseInfo: %w", err)
		}
		b = rest
		switch f.num {
		case 1:
			d.vers, err = appendVarints(d.vers, f)
		case 2:
			d.times, err = appendVarints(d.times, f)
		case 3:
			d.csets, err = appendVarints(d.csets, f)
		case 4:
			d.uids, err = appendVarints(d.uids, f)
		case 5:
			d.usids, err = appendVarints(d.usids, f)
		case 6:
			d.visibles, err = appendVarints(d.visibles, f)
		}
		if err != nil {
			return fmt.Errorf("DenseInfo: %w", err)
		}
	}
	return nil
}

func (d *blockDecoder) way(b []byte) error {
	w := &osm.Way{}
	m := meta{visible: true}
	d.keys, d.vals, d.ids, d.lats, d.lons = d.keys[:0], d.vals[:0], d.ids[:0], d.lats[:0], d.lons[:0]
	for len(b) > 0 {
		f, rest, err := nextField(b)
		if err != nil {
			return fmt.Errorf("Way: %w", err)
		}
		b = rest
		switch f.num {
		case 1:
			w.ID = osm.WayID(int64(f.v))
		case 2:
			d.keys, err = appendVarints(d.keys, f)
		case 3:
			d.vals, err = appendVarints(d.vals, f)
		case 4:
			m, err = d.info(f.b)
		case 8:
			d.ids, err = appendVarints(d.ids, f)
		case 9:
			d.lats, err = appendVarints(d.lats, f)
		case 10:
			d.lons, err = appendVarints(d.lons, f)
		}
		if err != nil {
			return fmt.Errorf("way %d: %w", w.ID, err)
		}
	}
	tags, err := d.tags(d.keys, d.vals)
	if err != nil {
		return fmt.Errorf("way %d: %w", w.ID, err)
	}
	hasLoc := len(d.lats) > 0 || len(d.lons) > 0
	if hasLoc && (len(d.lats) != len(d.ids) || len(d.lons) != len(d.ids)) {
		return fmt.Errorf("way %d: %d refs, %d lats, %d lons", w.ID, len(d.ids), len(d.lats), len(d.lons))
	}
	if len(d.ids) > 0 {
		w.Nodes = make(osm.WayNodes, len(d.ids))
		var ref, lat, lon int64
		for i := range d.ids {
			ref += protowire.DecodeZigZag(d.ids[i])
			w.Nodes[i].ID = osm.NodeID(ref)
			if hasLoc {
				lat += protowire.DecodeZigZag(d.lats[i])
				lon += protowire.DecodeZigZag(d.lons[i])
				w.Nodes[i].Lat, w.Nodes[i].Lon = d.coord(d.latOff, lat), d.coord(d.lonOff, lon)
			}
		}
	}
	w.Tags = tags
	w.Version, w.Timestamp, w.ChangesetID, w.UserID, w.User, w.Visible = m.version, m.timestamp, m.changeset, m.uid, m.user, m.visible
	d.objs = append(d.objs, w)
	return nil
}

func (d *blockDecoder) relation(b []byte) error {
	r := &osm.Relation{}
	m := meta{visible: true}
	d.keys, d.vals, d.ids, d.lats, d.lons = d.keys[:0], d.vals[:0], d.ids[:0], d.lats[:0], d.lons[:0]
	roles, memids, types := &d.lats, &d.ids, &d.lons // reuse scratch arrays
	for len(b) > 0 {
		f, rest, err := nextField(b)
		if err != nil {
			return fmt.Errorf("Relation: %w", err)
		}
		b = rest
		switch f.num {
		case 1:
			r.ID = osm.RelationID(int64(f.v))
		case 2:
			d.keys, err = appendVarints(d.keys, f)
		case 3:
			d.vals, err = appendVarints(d.vals, f)
		case 4:
			m, err = d.info(f.b)
		case 8:
			*roles, err = appendVarints(*roles, f)
		case 9:
			*memids, err = appendVarints(*memids, f)
		case 10:
			*types, err = appendVarints(*types, f)
		}
		if err != nil {
			return fmt.Errorf("relation %d: %w", r.ID, err)
		}
	}
	tags, err := d.tags(d.keys, d.vals)
	if err != nil {
		return fmt.Errorf("relation %d: %w", r.ID, err)
	}
	if len(*roles) != len(*memids) || len(*types) != len(*memids) {
		return fmt.Errorf("relation %d: %d roles, %d member ids, %d member types", r.ID, len(*roles), len(*memids), len(*types))
	}
	if len(*memids) > 0 {
		r.Members = make(osm.Members, len(*memids))
		var ref int64
		for i := range *memids {
			ref += protowire.DecodeZigZag((*memids)[i])
			role, err := d.str(uint64(uint32((*roles)[i])))
			if err != nil {
				return fmt.Errorf("relation %d: member role: %w", r.ID, err)
			}
			var t osm.Type
			switch (*types)[i] { // osmformat.proto Relation.MemberType
			case 0:
				t = osm.TypeNode
			case 1:
				t = osm.TypeWay
			case 2:
				t = osm.TypeRelation
			default:
				return fmt.Errorf("relation %d: member type %d", r.ID, (*types)[i])
			}
			r.Members[i] = osm.Member{Type: t, Ref: ref, Role: role}
		}
	}
	r.Tags = tags
	r.Version, r.Timestamp, r.ChangesetID, r.UserID, r.User, r.Visible = m.version, m.timestamp, m.changeset, m.uid, m.user, m.visible
	d.objs = append(d.objs, r)
	return nil
}
