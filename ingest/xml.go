package ingest

import (
	"context"
	"encoding/xml"
	"errors"
	"fmt"
	"io"
	"strconv"
	"time"

	"github.com/paulmach/osm"
)

// xmlReader streams OSM XML (history or snapshot), OsmChange and changeset
// metadata with one encoding/xml Decoder. Each object or changeset element is
// decoded into a fresh osm value, so memory stays bounded by one element.
type xmlReader struct {
	readerBase
	ctx context.Context
	dec *xml.Decoder

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

func newXMLReader(ctx context.Context, base readerBase, r io.Reader) *xmlReader {
	d := xml.NewDecoder(r)
	d.Strict = true
	return &xmlReader{readerBase: base, ctx: ctx, dec: d}
}

// pos is the decoder's current position: the start of the next token.
func (r *xmlReader) pos() Position {
	line, col := r.dec.InputPos()
	return Position{Offset: r.dec.InputOffset(), Line: line, Column: col, Element: r.elements}
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
	visibleGiven := false
	for _, a := range t.Attr {
		if a.Name.Local == "visible" {
			visibleGiven = true
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

// syntaxError wraps a decoder or read error with the current position.
func (r *xmlReader) syntaxError(err error) error {
	at := r.pos()
	var syn *xml.SyntaxError
	if errors.As(err, &syn) && syn.Line > 0 {
		at.Line = syn.Line
		at.Column = 0
		if line, col := r.dec.InputPos(); line == syn.Line {
			at.Column = col
		}
	}
	if errors.Is(err, io.ErrUnexpectedEOF) {
		return &ParseError{File: r.name, Pos: at, Err: fmt.Errorf("%w: truncated: %w", ErrFormat, err)}
	}
	return &ParseError{File: r.name, Pos: at, Err: fmt.Errorf("%w: %w", ErrFormat, err)}
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
