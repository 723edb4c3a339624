package rollout

import (
	"bufio"
	"encoding/xml"
	"fmt"
	"io"
	"slices"
	"strconv"

	"github.com/paulmach/orb"
	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/audit/proposal"
)

// osmObjects are the objects one upload file creates, with negative ids.
type osmObjects struct {
	next   int64
	nodeAt map[orb.Point]int64 // way vertices, shared by coordinate
	nodes  []osmNode
	ways   []osmWay
	rels   []osmRel
}

type osmNode struct {
	id   int64
	at   orb.Point
	tags osm.Tags
}

type osmWay struct {
	id    int64
	nodes []int64
	tags  osm.Tags
}

type osmRel struct {
	id      int64
	members []osmMember
	tags    osm.Tags
}

type osmMember struct {
	ref  int64
	role string
}

func newOSMObjects() *osmObjects { return &osmObjects{nodeAt: map[orb.Point]int64{}} }

// changes is the number of objects the file creates.
func (o *osmObjects) changes() int { return len(o.nodes) + len(o.ways) + len(o.rels) }

func (o *osmObjects) id() int64 {
	o.next--
	return o.next
}

// vertex returns the node at p, shared with every way of the file through p.
func (o *osmObjects) vertex(p orb.Point) int64 {
	if id, ok := o.nodeAt[p]; ok {
		return id
	}
	id := o.id()
	o.nodeAt[p] = id
	o.nodes = append(o.nodes, osmNode{id: id, at: p})
	return id
}

func (o *osmObjects) way(pts []orb.Point, tags osm.Tags) int64 {
	w := osmWay{id: o.id(), tags: tags}
	for _, p := range pts {
		w.nodes = append(w.nodes, o.vertex(p))
	}
	o.ways = append(o.ways, w)
	return w.id
}

// add adds the objects of one feature: a node for a point, a way for a line,
// a closed way for a one-ring polygon, a multipolygon relation of untagged
// ways otherwise. It returns false for a feature without geometry.
func (o *osmObjects) add(f *proposal.Feature) bool {
	tags := slices.Clone(f.Tags)
	switch g := f.Geom.(type) {
	case orb.Point:
		o.nodes = append(o.nodes, osmNode{id: o.id(), at: g, tags: tags})
	case orb.MultiPoint:
		for _, p := range g {
			o.nodes = append(o.nodes, osmNode{id: o.id(), at: p, tags: slices.Clone(tags)})
		}
	case orb.LineString:
		o.way(g, tags)
	case orb.MultiLineString:
		for _, l := range g {
			o.way(l, slices.Clone(tags))
		}
	case orb.Polygon:
		if len(g) == 1 {
			o.way(g[0], tags)
			return true
		}
		o.multipolygon(orb.MultiPolygon{g}, tags)
	case orb.MultiPolygon:
		if len(g) == 1 && len(g[0]) == 1 {
			o.way(g[0][0], tags)
			return true
		}
		o.multipolygon(g, tags)
	default:
		return false
	}
	return true
}

func (o *osmObjects) multipolygon(mp orb.MultiPolygon, tags osm.Tags) {
	if tags.Find("type") == "" {
		tags = append(tags, osm.Tag{Key: "type", Value: "multipolygon"})
	}
	r := osmRel{id: o.id(), tags: tags}
	for _, poly := range mp {
		for i, ring := range poly {
			role := "outer"
			if i > 0 {
				role = "inner"
			}
			r.members = append(r.members, osmMember{ref: o.way(ring, nil), role: role})
		}
	}
	o.rels = append(o.rels, r)
}

// writeOsmChange writes the objects as an OsmChange 0.6 file of one create
// block: nodes, then ways, then relations, so every reference points back.
func (o *osmObjects) writeOsmChange(w io.Writer, comment string) error {
	bw := bufio.NewWriter(w)
	bw.WriteString("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n")
	bw.WriteString("<osmChange version=\"0.6\" generator=\"loadwake\">\n")
	if comment != "" {
		bw.WriteString("<!-- ")
		xml.EscapeText(bw, []byte(comment))
		bw.WriteString(" -->\n")
	}
	bw.WriteString(" <create>\n")
	coord := func(v float64) string { return strconv.FormatFloat(v, 'f', 7, 64) }
	for _, n := range o.nodes {
		fmt.Fprintf(bw, "  <node id=\"%d\" version=\"0\" lat=\"%s\" lon=\"%s\"", n.id, coord(n.at[1]), coord(n.at[0]))
		writeTags(bw, n.tags, "  </node>\n")
	}
	for _, wy := range o.ways {
		fmt.Fprintf(bw, "  <way id=\"%d\" version=\"0\">\n", wy.id)
		for _, nd := range wy.nodes {
			fmt.Fprintf(bw, "   <nd ref=\"%d\"/>\n", nd)
		}
		writeTags(bw, wy.tags, "")
		bw.WriteString("  </way>\n")
	}
	for _, r := range o.rels {
		fmt.Fprintf(bw, "  <relation id=\"%d\" version=\"0\">\n", r.id)
		for _, m := range r.members {
			fmt.Fprintf(bw, "   <member type=\"way\" ref=\"%d\" role=\"%s\"/>\n", m.ref, m.role)
		}
		writeTags(bw, r.tags, "")
		bw.WriteString("  </relation>\n")
	}
	bw.WriteString(" </create>\n</osmChange>\n")
	return bw.Flush()
}

// writeTags writes tag elements. With closeNode set (a node), it first
// ends the start tag: "/>" when there are no tags, else ">" and, after the
// tags, closeNode.
func writeTags(bw *bufio.Writer, tags osm.Tags, closeNode string) {
	if closeNode != "" {
		if len(tags) == 0 {
			bw.WriteString("/>\n")
			return
		}
		bw.WriteString(">\n")
	}
	for _, t := range tags {
		bw.WriteString("   <tag k=\"")
		xml.EscapeText(bw, []byte(t.Key))
		bw.WriteString("\" v=\"")
		xml.EscapeText(bw, []byte(t.Value))
		bw.WriteString("\"/>\n")
	}
	if closeNode != "" {
		bw.WriteString(closeNode)
	}
}

// components groups features that share a way vertex (the same
// coordinates): they must be uploaded together, in one file.
func components(fs []proposal.Feature) [][]int {
	parent := make([]int, len(fs))
	for i := range parent {
		parent[i] = i
	}
	var find func(int) int
	find = func(i int) int {
		for parent[i] != i {
			parent[i] = parent[parent[i]]
			i = parent[i]
		}
		return i
	}
	first := map[orb.Point]int{}
	visit := func(i int, pts []orb.Point) {
		for _, p := range pts {
			if j, ok := first[p]; ok {
				parent[find(i)] = find(j)
			} else {
				first[p] = i
			}
		}
	}
	for i := range fs {
		switch g := fs[i].Geom.(type) {
		case orb.LineString:
			visit(i, g)
		case orb.MultiLineString:
			for _, l := range g {
				visit(i, l)
			}
		case orb.Polygon:
			for _, r := range g {
				visit(i, r)
			}
		case orb.MultiPolygon:
			for _, p := range g {
				for _, r := range p {
					visit(i, r)
				}
			}
		}
	}
	groups := map[int][]int{}
	var roots []int
	for i := range fs {
		r := find(i)
		if _, ok := groups[r]; !ok {
			roots = append(roots, r)
		}
		groups[r] = append(groups[r], i)
	}
	out := make([][]int, 0, len(roots))
	for _, r := range roots {
		out = append(out, groups[r])
	}
	return out
}
