package osmfile

import (
	"bufio"
	"context"
	"encoding/xml"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"time"

	"github.com/paulmach/osm"
)

// xmlReader streams OSM XML (history or snapshot), OsmChange and changeset
// metadata. A raw encoding/xml Decoder tokenizes the file; openElements keeps
// the start position of every open element and checks the nesting, so that an
// element left open is reported where it starts; a second Decoder reading
// those tokens decodes each object or changeset element into a fresh osm
// value, so memory stays bounded by one element.
type xmlReader struct {
	readerBase
	ctx  context.Context
	raw  *xml.Decoder // tokenizer; its position is the reader's position
	open *openElements
	dec  *xml.Decoder // reads open's tokens: Token, Skip, DecodeElement

	item   Item
	err    error
	closed bool

	depth    int          // element depth of the decoder (root is 1)
	rootSeen bool         // the root element has been read
	action   Action       // OsmChange block being read
	elements int64        // object and changeset elements so far
	check    versionCheck // version order of consecutive objects
}

var _ Reader = (*xmlReader)(nil)

func newXMLReader(ctx context.Context, base readerBase, r *bufio.Reader) *xmlReader {
	lines := &lineStarts{r: r}
	raw := xml.NewDecoder(lines)
	raw.Strict = true
	open := &openElements{raw: raw, lines: lines}
	return &xmlReader{readerBase: base, ctx: ctx, raw: raw, open: open, dec: xml.NewTokenDecoder(open)}
}

// pos is the tokenizer's current position: the start of the next token.
func (r *xmlReader) pos() Position {
	return rawPos(r.raw, r.open.lines)
}

func rawPos(d *xml.Decoder, lines *lineStarts) Position {
	line, col := d.InputPos()
	off := d.InputOffset()
	if col < 1 {
		// encoding/xml pushed back the newline ending line: it does not
		// restore the line's start and reports column 0. The newline is
		// the line's last byte.
		col = int(off-lines.prev) + 1
	}
	return Position{Offset: off, Line: line, Column: col}
}

// lineStarts is the tokenizer's byte source; it keeps the byte offsets where
// the current and the previous line start.
type lineStarts struct {
	r         *bufio.Reader
	off       int64
	cur, prev int64
}

// ReadByte is what encoding/xml reads with.
func (l *lineStarts) ReadByte() (byte, error) {
	b, err := l.r.ReadByte()
	if err == nil {
		l.off++
		if b == '\n' {
			l.prev, l.cur = l.cur, l.off
		}
	}
	return b, err
}

// Read makes lineStarts an io.Reader; encoding/xml uses ReadByte only.
func (l *lineStarts) Read(p []byte) (int, error) {
	for i := range p {
		b, err := l.ReadByte()
		if err != nil {
			return i, err
		}
		p[i] = b
	}
	return len(p), nil
}

// openElements is an xml.TokenReader over a raw tokenizer that remembers where
// each open element starts. An end tag that closes an outer element, or the
// end of the file, while an element is open gives a *nestingError naming it.
type openElements struct {
	raw   *xml.Decoder
	lines *lineStarts
	stack []openElement
}

type openElement struct {
	name xml.Name // as written: Space is the prefix
	pos  Position
}

// nestingError is an element left open (end tag of an outer element, or end
// of file) or an end tag that matches no open element.
type nestingError struct {
	open   openElement // innermost open element; zero name for a stray end tag
	end    string      // the end tag found, "" at the end of the file
	endPos Position    // where the end tag or the end of the file is
	outer  bool        // end closes an element outside open
}

func (e *nestingError) Error() string {
	switch {
	case e.open.name.Local == "":
		return fmt.Sprintf("end tag </%s> closes no open element", e.end)
	case e.end == "":
		return fmt.Sprintf("element <%s> is not closed: the file ends at line %d, column %d (truncated?)",
			xmlName(e.open.name), e.endPos.Line, e.endPos.Column)
	case e.outer:
		return fmt.Sprintf("element <%s> is not closed: </%s> at line %d, column %d closes an element around it",
			xmlName(e.open.name), e.end, e.endPos.Line, e.endPos.Column)
	}
	return fmt.Sprintf("end tag </%s> does not match <%s> opened at line %d, column %d",
		e.end, xmlName(e.open.name), e.open.pos.Line, e.open.pos.Column)
}

// at is where the problem is: the start of the element left open, else the end tag.
func (e *nestingError) at() Position {
	if e.open.name.Local != "" && (e.end == "" || e.outer) {
		return e.open.pos
	}
	return e.endPos
}

func xmlName(n xml.Name) string {
	if n.Space != "" {
		return n.Space + ":" + n.Local
	}
	return n.Local
}

// Token returns the next raw token after checking its nesting.
func (o *openElements) Token() (xml.Token, error) {
	at := rawPos(o.raw, o.lines)
	tok, err := o.raw.RawToken()
	if err != nil {
		if errors.Is(err, io.EOF) && len(o.stack) > 0 {
			return nil, &nestingError{open: o.stack[len(o.stack)-1], endPos: at}
		}
		return tok, err
	}
	switch t := tok.(type) {
	case xml.StartElement:
		o.stack = append(o.stack, openElement{name: t.Name, pos: at})
	case xml.EndElement:
		if len(o.stack) == 0 {
			return nil, &nestingError{end: xmlName(t.Name), endPos: at}
		}
		top := o.stack[len(o.stack)-1]
		if top.name != t.Name {
			e := &nestingError{open: top, end: xmlName(t.Name), endPos: at}
			for _, outer := range o.stack[:len(o.stack)-1] {
				e.outer = e.outer || outer.name == t.Name
			}
			return nil, e
		}
		o.stack = o.stack[:len(o.stack)-1]
	}
	return tok, nil
}

// Scan advances to the next object or changeset. It returns false at the end
// of the file, on the first error and once the context is cancelled.
func (r *xmlReader) Scan() bool {
	if r.err != nil || r.closed {
		return false
	}
	if r.elements%1024 == 0 {
		if err := r.ctx.Err(); err != nil {
			r.err = fmt.Errorf("ingest: reading %s: %w", r.name, err)
			return false
		}
	}
	for {
		at := r.pos()
		tok, err := r.dec.Token()
		if err != nil {
			if errors.Is(err, io.EOF) {
				if !r.rootSeen {
					r.err = r.errorf(at, "", ErrFormat, "no root element")
				}
				return false
			}
			r.err = r.syntaxError(err)
			return false
		}
		switch t := tok.(type) {
		case xml.StartElement:
			r.depth++
			if ok, stop := r.start(t, at); stop {
				return ok
			}
		case xml.EndElement:
			r.depth--
			if r.format == FormatOsmChange && r.depth == 1 {
				r.action = ActionNone
			}
		}
	}
}

// start handles one start element; stop reports whether Scan returns, with ok.
func (r *xmlReader) start(t xml.StartElement, at Position) (ok, stop bool) {
	name := t.Name.Local
	switch {
	case r.depth == 1:
		want := "osm"
		if r.format == FormatOsmChange {
			want = "osmChange"
		}
		if name != want {
			r.err = r.errorf(at, "", ErrFormat, "root element <%s>, want <%s>", name, want)
			return false, true
		}
		r.rootSeen = true
		return false, false
	case r.format == FormatOsmChange && r.depth == 2:
		switch name {
		case "create":
			r.action = ActionCreate
		case "modify":
			r.action = ActionModify
		case "delete":
			r.action = ActionDelete
		default:
			return r.skip()
		}
		return false, false
	case r.format == FormatOsmChange && r.depth == 3 && r.action != ActionNone,
		r.format != FormatOsmChange && r.depth == 2:
		switch name {
		case "node", "way", "relation", "changeset":
		default:
			return r.skip() // <bounds>, <note> and the like
		}
		r.elements++
		at.Element = r.elements
		if err := r.decodeElement(t, at); err != nil {
			r.err = err
			return false, true
		}
		return true, true
	}
	return r.skip()
}

// skip consumes the element just started.
func (r *xmlReader) skip() (ok, stop bool) {
	if err := r.dec.Skip(); err != nil {
		r.err = r.syntaxError(err)
		return false, true
	}
	r.depth--
	return false, false
}

// decodeElement decodes an object or changeset element into r.item and validates it.
func (r *xmlReader) decodeElement(t xml.StartElement, at Position) error {
	visibleGiven, hasLat, hasLon := false, false, false
	for _, a := range t.Attr {
		switch a.Name.Local {
		case "visible":
			visibleGiven = true
		case "lat":
			hasLat = true
		case "lon":
			hasLon = true
		}
	}
	var (
		obj osm.Object
		err error
	)
	switch t.Name.Local {
	case "node":
		n := &osm.Node{}
		err = r.dec.DecodeElement(n, &t)
		obj = n
	case "way":
		w := &osm.Way{}
		err = r.dec.DecodeElement(w, &t)
		obj = w
	case "relation":
		rel := &osm.Relation{}
		err = r.dec.DecodeElement(rel, &t)
		obj = rel
	case "changeset":
		c := &osm.Changeset{}
		if err := r.dec.DecodeElement(c, &t); err != nil {
			return r.elementError(err, at, "changeset")
		}
		r.depth--
		label := fmt.Sprintf("changeset/%d", c.ID)
		if c.ID <= 0 {
			return r.errorf(at, label, ErrFormat, "changeset id must be positive")
		}
		if c.CreatedAt.IsZero() {
			return r.errorf(at, label, ErrFormat, "changeset without created_at")
		}
		if err := checkChangesetBounds(c); err != nil {
			return &ParseError{File: r.name, Pos: at, Object: label, Err: err}
		}
		r.item = Item{Changeset: c, Pos: at}
		return nil
	}
	if err != nil {
		return r.elementError(err, at, t.Name.Local)
	}
	r.depth--

	visible := true
	if r.format == FormatOsmChange {
		visible = r.action != ActionDelete
	}
	switch o := obj.(type) {
	case *osm.Node:
		if r.format == FormatOsmChange || !visibleGiven {
			o.Visible = visible
		}
		if o.Visible && (!hasLat || !hasLon) {
			o.Lat, o.Lon = math.NaN(), math.NaN() // no location: checkLocation refuses it
		}
	case *osm.Way:
		if r.format == FormatOsmChange || !visibleGiven {
			o.Visible = visible
		}
	case *osm.Relation:
		if r.format == FormatOsmChange || !visibleGiven {
			o.Visible = visible
		}
	}
	if err := r.check.object(obj); err != nil {
		return &ParseError{File: r.name, Pos: at, Object: objectLabelOf(obj), Err: err}
	}
	action := ActionNone
	if r.format == FormatOsmChange {
		action = r.action
	}
	r.item = Item{Object: obj, Action: action, Pos: at}
	return nil
}

// elementError reports an element that does not decode: broken XML inside it
// or an attribute that is not a number, time or boolean.
func (r *xmlReader) elementError(err error, at Position, what string) error {
	var syn *xml.SyntaxError
	if errors.As(err, &syn) || errors.Is(err, io.ErrUnexpectedEOF) || !isValueError(err) {
		return r.syntaxError(err)
	}
	return &ParseError{File: r.name, Pos: at, Err: fmt.Errorf("%w: <%s>: %w", ErrFormat, what, err)}
}

// isValueError tells an attribute conversion error (strconv, time) from a
// read error of the underlying stream.
func isValueError(err error) bool {
	var pe *time.ParseError
	var ne *strconv.NumError
	return errors.As(err, &pe) || errors.As(err, &ne)
}

// syntaxError wraps a decoder or read error with the tokenizer's position,
// or an element left open with the position of its start tag.
func (r *xmlReader) syntaxError(err error) error {
	at := r.pos()
	at.Element = r.elements
	var nest *nestingError
	if errors.As(err, &nest) {
		p := nest.at()
		at.Offset, at.Line, at.Column = p.Offset, p.Line, p.Column
		if !r.inObject() {
			at.Element = 0 // the open element is the root or an OsmChange block
		}
		return &ParseError{File: r.name, Pos: at, Err: fmt.Errorf("%w: %w", ErrFormat, err)}
	}
	var syn *xml.SyntaxError
	if errors.Is(err, io.ErrUnexpectedEOF) || errors.As(err, &syn) && syn.Msg == "unexpected EOF" {
		msg := "truncated"
		if n := len(r.open.stack); n > 0 {
			top := r.open.stack[n-1]
			msg = fmt.Sprintf("truncated inside <%s> opened at line %d, column %d", xmlName(top.name), top.pos.Line, top.pos.Column)
		}
		return &ParseError{File: r.name, Pos: at, Err: fmt.Errorf("%w: %s: %w", ErrFormat, msg, err)}
	}
	return &ParseError{File: r.name, Pos: at, Err: fmt.Errorf("%w: %w", ErrFormat, err)}
}

// inObject reports whether the innermost open element is an object or
// changeset element or lies inside one.
func (r *xmlReader) inObject() bool {
	depth := 2
	if r.format == FormatOsmChange {
		depth = 3
	}
	if len(r.open.stack) < depth {
		return false
	}
	switch r.open.stack[depth-1].name.Local {
	case "node", "way", "relation", "changeset":
		return true
	}
	return false
}

// Item returns the current item; it is owned by the caller.
func (r *xmlReader) Item() Item { return r.item }

// Err returns the first error other than end of file.
func (r *xmlReader) Err() error { return r.err }

// Close releases the reader and, for OpenFile, closes the file. Scan returns
// false afterwards.
func (r *xmlReader) Close() error {
	if r.closed {
		return nil
	}
	r.closed = true
	return r.closeAll()
}
