package osmfile

import (
	"errors"
	"fmt"

	"github.com/paulmach/osm"
)

// Format is the kind of content a history file holds, detected from its first bytes.
type Format uint8

// The formats loadwake reads.
const (
	FormatUnknown    Format = iota
	FormatPBF               // OSM PBF, snapshot or full history (.osm.pbf, .osh.pbf)
	FormatXML               // OSM XML, one or several versions per object (.osm, .osh)
	FormatOsmChange         // OsmChange (.osc): create, modify and delete blocks
	FormatChangesets        // changeset metadata XML (<osm> with <changeset> elements)
)

// String returns a short name of the format.
func (f Format) String() string {
	switch f {
	case FormatPBF:
		return "pbf"
	case FormatXML:
		return "osm-xml"
	case FormatOsmChange:
		return "osmchange"
	case FormatChangesets:
		return "changesets"
	}
	return "unknown"
}

// Action is the OsmChange block an object came from; ActionNone for other formats.
type Action uint8

// The OsmChange actions.
const (
	ActionNone Action = iota
	ActionCreate
	ActionModify
	ActionDelete
)

// Position says where in a file an item or an error is. Fields that a format
// cannot give are zero.
type Position struct {
	Offset  int64 // byte offset in the decompressed content
	Line    int   // 1-based line (XML formats)
	Column  int   // 1-based column (XML formats)
	Element int64 // 1-based number of the object or changeset element in the file
}

// String formats a position as "line L, column C (byte B, element E)", leaving out what is unknown.
func (p Position) String() string {
	var s string
	if p.Line > 0 {
		s = fmt.Sprintf("line %d, column %d", p.Line, p.Column)
	}
	if p.Offset > 0 || s == "" {
		if s != "" {
			s += ", "
		}
		s += fmt.Sprintf("byte %d", p.Offset)
	}
	if p.Element > 0 {
		s += fmt.Sprintf(", element %d", p.Element)
	}
	return s
}

// Item is one thing a Reader yields: exactly one of Object and Changeset is set.
//
// Object is *osm.Node, *osm.Way or *osm.Relation with ID, Version, Timestamp,
// ChangesetID, UserID, User, Visible and Tags filled; Visible is true unless the
// file says visible="false" or the object came from an OsmChange delete block.
type Item struct {
	Object    osm.Object
	Changeset *osm.Changeset
	Action    Action
	Pos       Position
}

// Reader streams the items of one file, in file order. It is shaped like
// bufio.Scanner: Scan advances, Item returns the current item (owned by the
// caller after Scan returns), Err returns the first error other than EOF, and
// Close releases the file and the decoders.
type Reader interface {
	Scan() bool
	Item() Item
	Err() error
	Close() error
	Format() Format
	// BytesRead is how many bytes of the compressed file have been consumed, for progress.
	BytesRead() int64
}

// Sentinel errors; test with errors.Is.
var (
	ErrFormat  = errors.New("osmfile: malformed input")
	ErrUnknown = errors.New("osmfile: unknown file format")
	ErrOrder   = errors.New("osmfile: versions out of order")
)

// ParseError is an error in an input file at a known position.
type ParseError struct {
	File   string
	Pos    Position
	Object string // "way/42 v3" when the error is about one object, else ""
	Err    error  // wraps ErrFormat, ErrOrder or ErrUnknown, and the cause
}

func (e *ParseError) Error() string {
	s := e.File + ": " + e.Pos.String()
	if e.Object != "" {
		s += ", " + e.Object
	}
	return s + ": " + e.Err.Error()
}

// Unwrap returns the underlying error.
func (e *ParseError) Unwrap() error { return e.Err }
