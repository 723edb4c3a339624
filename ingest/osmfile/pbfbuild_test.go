package osmfile

import (
	"bytes"
	"compress/zlib"
	"context"
	"encoding/binary"
	"testing"

	"github.com/paulmach/osm/osmpbf"
	"google.golang.org/protobuf/encoding/protowire"
)

// A small OSM PBF writer for hand-made test files, following osmformat.proto
// and fileformat.proto (wiki.openstreetmap.org/wiki/PBF_Format). Coordinates
// are raw values in units of the default granularity, 100 nanodegrees;
// timestamps are seconds (the default date_granularity of 1000 ms).

// pbfNode is one node version of a hand-made file.
type pbfNode struct {
	id, lat, lon   int64
	version        int32
	ts             int64
	deleted        bool
	noLat, noLon   bool // plain nodes only: leave the field out
	user           uint32
	tagKey, tagVal uint32 // string table indexes, 0 for no tag
}

// pbfMsg appends a length-delimited field.
func pbfMsg(b []byte, num protowire.Number, msg []byte) []byte {
	b = protowire.AppendTag(b, num, protowire.BytesType)
	return protowire.AppendBytes(b, msg)
}

// pbfVarint appends a varint field.
func pbfVarint(b []byte, num protowire.Number, v uint64) []byte {
	b = protowire.AppendTag(b, num, protowire.VarintType)
	return protowire.AppendVarint(b, v)
}

// pbfPacked appends a packed repeated varint field.
func pbfPacked(b []byte, num protowire.Number, vs []uint64) []byte {
	var p []byte
	for _, v := range vs {
		p = protowire.AppendVarint(p, v)
	}
	return pbfMsg(b, num, p)
}

func pbfInfo(n pbfNode) []byte {
	var info []byte
	info = pbfVarint(info, 1, uint64(n.version))
	info = pbfVarint(info, 2, uint64(n.ts))
	info = pbfVarint(info, 3, 1)
	info = pbfVarint(info, 4, 1)
	info = pbfVarint(info, 5, uint64(n.user))
	if n.deleted {
		info = pbfVarint(info, 6, 0)
	}
	return info
}

// pbfPlainNodes is a PrimitiveGroup of plain Node messages.
func pbfPlainNodes(nodes ...pbfNode) []byte {
	var g []byte
	for _, n := range nodes {
		var m []byte
		m = pbfVarint(m, 1, protowire.EncodeZigZag(n.id))
		if n.tagKey != 0 {
			m = pbfPacked(m, 2, []uint64{uint64(n.tagKey)})
			m = pbfPacked(m, 3, []uint64{uint64(n.tagVal)})
		}
		m = pbfMsg(m, 4, pbfInfo(n))
		if !n.noLat {
			m = pbfVarint(m, 8, protowire.EncodeZigZag(n.lat))
		}
		if !n.noLon {
			m = pbfVarint(m, 9, protowire.EncodeZigZag(n.lon))
		}
		g = pbfMsg(g, 1, m)
	}
	return g
}

// pbfDenseNodes is a PrimitiveGroup with one DenseNodes message.
func pbfDenseNodes(nodes ...pbfNode) []byte {
	var ids, lats, lons, vers, times, csets, uids, users, visible, kv []uint64
	var prev pbfNode
	for _, n := range nodes {
		ids = append(ids, protowire.EncodeZigZag(n.id-prev.id))
		lats = append(lats, protowire.EncodeZigZag(n.lat-prev.lat))
		lons = append(lons, protowire.EncodeZigZag(n.lon-prev.lon))
		vers = append(vers, uint64(n.version))
		times = append(times, protowire.EncodeZigZag(n.ts-prev.ts))
		csets = append(csets, protowire.EncodeZigZag(0))
		uids = append(uids, protowire.EncodeZigZag(0))
		users = append(users, protowire.EncodeZigZag(int64(n.user)-int64(prev.user)))
		vis := uint64(1)
		if n.deleted {
			vis = 0
		}
		visible = append(visible, vis)
		if n.tagKey != 0 {
			kv = append(kv, uint64(n.tagKey), uint64(n.tagVal))
		}
		kv = append(kv, 0)
		prev = n
	}
	var info []byte
	info = pbfPacked(info, 1, vers)
	info = pbfPacked(info, 2, times)
	info = pbfPacked(info, 3, csets)
	info = pbfPacked(info, 4, uids)
	info = pbfPacked(info, 5, users)
	info = pbfPacked(info, 6, visible)
	var d []byte
	d = pbfPacked(d, 1, ids)
	d = pbfMsg(d, 5, info)
	d = pbfPacked(d, 8, lats)
	d = pbfPacked(d, 9, lons)
	d = pbfPacked(d, 10, kv)
	return pbfMsg(nil, 2, d)
}

// pbfHead starts a Way or Relation message: its id and Info.
func pbfHead(id int64, version int32, ts int64) []byte {
	m := pbfVarint(nil, 1, uint64(id))
	return pbfMsg(m, 4, pbfInfo(pbfNode{version: version, ts: ts, user: 1}))
}

// pbfDeltas zig-zag codes the differences of consecutive values.
func pbfDeltas(vs []int64) []uint64 {
	out := make([]uint64, len(vs))
	var prev int64
	for i, v := range vs {
		out[i], prev = protowire.EncodeZigZag(v-prev), v
	}
	return out
}

// pbfWay is a PrimitiveGroup with one way of the given node refs.
func pbfWay(id int64, version int32, ts int64, refs ...int64) []byte {
	m := pbfPacked(pbfHead(id, version, ts), 8, pbfDeltas(refs))
	return pbfMsg(nil, 3, m)
}

// pbfRelation is a PrimitiveGroup with one relation whose members are ways
// with the role "outer".
func pbfRelation(id int64, version int32, ts int64, ways ...int64) []byte {
	roles, types := make([]uint64, len(ways)), make([]uint64, len(ways))
	for i := range ways {
		roles[i], types[i] = 2, 1 // pbfStrings()[2]; osmformat.proto MemberType WAY
	}
	m := pbfHead(id, version, ts)
	m = pbfPacked(m, 8, roles)
	m = pbfPacked(m, 9, pbfDeltas(ways))
	m = pbfPacked(m, 10, types)
	return pbfMsg(nil, 4, m)
}

// pbfSample is a PrimitiveBlock of dense nodes (one tagged, a deleted
// version), plain nodes when plain is set, a way and a relation.
func pbfSample(plain bool) []byte {
	const ts = 1577836800
	groups := [][]byte{pbfDenseNodes(pbfNode{id: 1, lat: 10, lon: 20, version: 1, ts: ts, user: 1, tagKey: 3, tagVal: 4},
		pbfNode{id: 1, version: 2, ts: ts + 60, user: 1, deleted: true},
		pbfNode{id: 2, lat: -15, lon: 25, version: 1, ts: ts, user: 1})}
	if plain {
		groups = append(groups, pbfPlainNodes(pbfNode{id: 3, lat: 900000000, lon: -1800000000, version: 1, ts: ts, user: 1}))
	}
	groups = append(groups, pbfWay(5, 1, ts, 2, 1), pbfRelation(9, 1, ts, 5))
	return pbfPrimitiveBlock(groups...)
}

// pbfStrings is the string table of every hand-made block: "" (index 0, as
// the format requires), then a user name, a role and one tag.
func pbfStrings() []string { return []string{"", "ann", "outer", "highway", "track"} }

// pbfPrimitiveBlock is a PrimitiveBlock with the string table and the groups.
func pbfPrimitiveBlock(groups ...[]byte) []byte {
	var st []byte
	for _, s := range pbfStrings() {
		st = pbfMsg(st, 1, []byte(s))
	}
	b := pbfMsg(nil, 1, st)
	for _, g := range groups {
		b = pbfMsg(b, 2, g)
	}
	return b
}

// pbfFileBlock appends one file block: length, BlobHeader, Blob. The blob is
// zlib-compressed when zip is set, else raw.
func pbfFileBlock(tb testing.TB, out []byte, typ string, data []byte, zip bool) []byte {
	tb.Helper()
	var blob []byte
	if zip {
		var z bytes.Buffer
		w := zlib.NewWriter(&z)
		if _, err := w.Write(data); err != nil {
			tb.Fatal(err)
		}
		if err := w.Close(); err != nil {
			tb.Fatal(err)
		}
		blob = pbfVarint(blob, 2, uint64(len(data)))
		blob = pbfMsg(blob, 3, z.Bytes())
	} else {
		blob = pbfMsg(blob, 1, data)
	}
	var hdr []byte
	hdr = pbfMsg(hdr, 1, []byte(typ))
	hdr = pbfVarint(hdr, 3, uint64(len(blob)))
	out = binary.BigEndian.AppendUint32(out, uint32(len(hdr)))
	return append(append(out, hdr...), blob...)
}

// pbfFile is a history PBF: an OSMHeader block, then one OSMData block per
// PrimitiveBlock. dataOffset is the byte offset of the first data block.
func pbfFile(tb testing.TB, zip bool, blocks ...[]byte) (file []byte, dataOffset int64) {
	tb.Helper()
	var hb []byte
	for _, f := range []string{"OsmSchema-V0.6", "DenseNodes", "HistoricalInformation"} {
		hb = pbfMsg(hb, 4, []byte(f))
	}
	file = pbfFileBlock(tb, nil, "OSMHeader", hb, zip)
	dataOffset = int64(len(file))
	for _, b := range blocks {
		file = pbfFileBlock(tb, file, "OSMData", b, zip)
	}
	return file, dataOffset
}

// TestPBFWriterMatchesOsmpbf checks the test writer against an outside
// decoder: github.com/paulmach/osm/osmpbf v0.8.0 reads a hand-made file of
// dense nodes (one tagged, one deleted), a way and a relation, raw and zlib,
// as our reader does. osmpbf cannot read plain nodes, so they are left out.
func TestPBFWriterMatchesOsmpbf(t *testing.T) {
	block := pbfSample(false)
	for _, zip := range []bool{false, true} {
		data, _ := pbfFile(t, zip, block)
		_, items := mustReadAll(t, writeTemp(t, "hand.osh.pbf", data))
		ref := osmpbf.New(context.Background(), bytes.NewReader(data), 1)
		i := 0
		for ref.Scan() {
			if i >= len(items) {
				t.Fatalf("osmpbf has more than our %d objects", len(items))
			}
			if err := sameObject(items[i].Object, ref.Object()); err != nil {
				t.Errorf("zlib %v, object %d: %v", zip, i, err)
			}
			i++
		}
		if err := ref.Err(); err != nil {
			t.Fatal(err)
		}
		ref.Close()
		if i != 5 || len(items) != 5 {
			t.Errorf("zlib %v: osmpbf read %d objects, we %d, want 5", zip, i, len(items))
		}
	}
}
