package study

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"path/filepath"
	"sort"
	"strings"
	"time"
)

// Treatment files: what ReadAssignment accepts.
//
// CSV, with a header row (names in any case; lines starting with # are
// comments), in one of two shapes:
//
//	unit,start            one row per unit: its first treated month
//	d07,2031-04           (an empty start lists a unit as never treated)
//
//	unit,month,treated    one row per unit and month, treated 1/0 (or
//	d07,2031-03,0         true/false, yes/no): the first treated month
//	d07,2031-04,1         is the start
//
// The unit column is called unit, unit_id or id (or ReadOptions.UnitColumn);
// the start column start, first_month, first_treated or start_month. An
// optional event (or event_name) column names the event. Months are YYYY-MM
// or YYYY-MM-DD (the day is dropped).
//
// GeoJSON: a FeatureCollection whose features carry the unit id in a
// property (id or unit, or ReadOptions.UnitColumn; else the feature's own
// id) and the first treated month in a property start, first_month,
// first_treated or date. The event's name comes from an event property or
// the collection's name member. Geometries are not read: the units come from
// the study's own units, matched by id.
//
// A treatment that switches off is refused: an end column or property with a
// value (end, end_month, last_month, until), or an untreated month after a
// unit's first treated one; the staggered estimators assume a unit stays
// treated. Errors name the file and the line (CSV, GeoJSON) and unwrap to
// ErrAssignment.

// ReadOptions tunes ReadAssignment.
type ReadOptions struct {
	// UnitColumn names the column or property holding the unit id; ""
	// tries unit, unit_id and id.
	UnitColumn string
	// Event names the event, overriding the file's; "" takes the file's
	// event column or name, else the file's base name.
	Event string
}

// The column and property names a treatment file may use, in order of
// preference.
func unitNames() []string { return []string{"unit", "unit_id", "id"} }
func startNames() []string {
	return []string{"start", "first_month", "first_treated", "start_month", "date"}
}
func endNames() []string   { return []string{"end", "end_month", "last_month", "until"} }
func eventNames() []string { return []string{"event", "event_name"} }

// ReadAssignment reads a treatment file (CSV or GeoJSON, told apart by the
// first character) from r; name is the file's name for messages and
// Assignment.Source.
func ReadAssignment(r io.Reader, name string, o ReadOptions) (*Assignment, error) {
	data, err := io.ReadAll(r)
	if err != nil {
		return nil, fmt.Errorf("read treatment file %s: %w", name, err)
	}
	var a *Assignment
	if t := bytes.TrimLeft(data, " \t\r\n\ufeff"); len(t) > 0 && t[0] == '{' {
		a, err = readGeoJSONAssignment(data, name, o)
	} else {
		a, err = readCSVAssignment(data, name, o)
	}
	if err != nil {
		return nil, err
	}
	a.Source = name
	switch {
	case o.Event != "":
		a.Event = o.Event
	case a.Event == "":
		a.Event = strings.TrimSuffix(filepath.Base(name), filepath.Ext(name))
	}
	if err := a.Validate(); err != nil {
		return nil, err
	}
	return a, nil
}

// posErr is an error at a position of a treatment file.
func posErr(name string, line int, format string, args ...any) error {
	return fmt.Errorf("%w: %s:%d: %s", ErrAssignment, name, line, fmt.Sprintf(format, args...))
}

// parseMonth reads YYYY-MM or YYYY-MM-DD as the first day of its month.
func parseMonth(s string) (time.Time, error) {
	s = strings.TrimSpace(s)
	for _, layout := range []string{"2006-01", time.DateOnly} {
		if t, err := time.Parse(layout, s); err == nil {
			return monthOf(t), nil
		}
	}
	if t, err := time.Parse(time.RFC3339, s); err == nil {
		return monthOf(t), nil
	}
	return time.Time{}, fmt.Errorf("%q is not a month (want YYYY-MM or YYYY-MM-DD)", s)
}

func findColumn(header []string, want []string) int {
	for _, w := range want {
		for i, h := range header {
			if strings.EqualFold(strings.TrimSpace(strings.TrimPrefix(h, "\ufeff")), w) {
				return i
			}
		}
	}
	return -1
}

// unitMonth is one row of the long CSV shape.
type unitMonth struct {
	month   time.Time
	treated bool
	line    int
}

func readCSVAssignment(data []byte, name string, o ReadOptions) (*Assignment, error) {
	cr := csv.NewReader(bytes.NewReader(data))
	cr.Comment = '#'
	cr.FieldsPerRecord = -1
	cr.TrimLeadingSpace = true
	header, err := cr.Read()
	if errors.Is(err, io.EOF) {
		return nil, fmt.Errorf("%w: %s is empty: want a header row such as unit,start", ErrAssignment, name)
	}
	if err != nil {
		return nil, csvErr(name, err)
	}
	hline, _ := cr.FieldPos(0)
	unitCols := unitNames()
	if o.UnitColumn != "" {
		unitCols = []string{o.UnitColumn}
	}
	cu, cs := findColumn(header, unitCols), findColumn(header, startNames())
	ce, cev := findColumn(header, endNames()), findColumn(header, eventNames())
	cm, ct := findColumn(header, []string{"month"}), findColumn(header, []string{"treated"})
	long := cs < 0 && cm >= 0 && ct >= 0
	switch {
	case cu < 0:
		return nil, posErr(name, hline, "no unit column in the header %q (want one of %s)", strings.Join(header, ","), strings.Join(unitCols, ", "))
	case cs < 0 && !long:
		return nil, posErr(name, hline, "no start column in the header %q (want one of %s, or month and treated columns)", strings.Join(header, ","), strings.Join(startNames(), ", "))
	}
	a := &Assignment{}
	eventLine := 0
	byUnit := map[string][]unitMonth{}
	var order []string
	for {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, csvErr(name, err)
		}
		line, _ := cr.FieldPos(0)
		field := func(c int) string {
			if c < 0 || c >= len(rec) {
				return ""
			}
			return strings.TrimSpace(rec[c])
		}
		unit := field(cu)
		if unit == "" {
			return nil, posErr(name, line, "empty unit id")
		}
		if ev := field(cev); ev != "" {
			if a.Event != "" && ev != a.Event {
				return nil, posErr(name, line, "event %q differs from %q on line %d: one file holds one event", ev, a.Event, eventLine)
			}
			a.Event, eventLine = ev, line
		}
		if end := field(ce); end != "" {
			return nil, posErr(name, line, "unit %q has an end (%s = %q): events that switch off are not supported; the staggered estimators need each unit to stay treated from its first month on (leave the end empty, or study the event's start only)",
				unit, strings.TrimSpace(header[ce]), end)
		}
		if !long {
			s := field(cs)
			if s == "" {
				continue // listed as never treated
			}
			m, err := parseMonth(s)
			if err != nil {
				return nil, posErr(name, line, "unit %q: %v", unit, err)
			}
			a.Starts = append(a.Starts, Start{Unit: unit, Month: m, Pos: fmt.Sprintf("%s:%d", name, line)})
			continue
		}
		m, err := parseMonth(field(cm))
		if err != nil {
			return nil, posErr(name, line, "unit %q: %v", unit, err)
		}
		tr, err := parseTreated(field(ct))
		if err != nil {
			return nil, posErr(name, line, "unit %q: %v", unit, err)
		}
		if _, ok := byUnit[unit]; !ok {
			order = append(order, unit)
		}
		byUnit[unit] = append(byUnit[unit], unitMonth{month: m, treated: tr, line: line})
	}
	for _, unit := range order {
		s, ok, err := startOfLong(name, unit, byUnit[unit])
		if err != nil {
			return nil, err
		}
		if ok {
			a.Starts = append(a.Starts, s)
		}
	}
	return a, nil
}

// startOfLong finds a unit's first treated month in its long rows and
// refuses a later untreated month or a month given twice.
func startOfLong(name, unit string, rows []unitMonth) (Start, bool, error) {
	sort.SliceStable(rows, func(i, j int) bool { return rows[i].month.Before(rows[j].month) })
	var first *unitMonth
	for i := range rows {
		r := &rows[i]
		if i > 0 && r.month.Equal(rows[i-1].month) {
			return Start{}, false, posErr(name, r.line, "unit %q: month %s is given twice (also on line %d)", unit, r.month.Format("2006-01"), rows[i-1].line)
		}
		switch {
		case r.treated && first == nil:
			first = r
		case !r.treated && first != nil:
			return Start{}, false, posErr(name, r.line, "unit %q is untreated in %s after its first treated month %s (line %d): events that switch off are not supported; the staggered estimators need each unit to stay treated from its first month on",
				unit, r.month.Format("2006-01"), first.month.Format("2006-01"), first.line)
		}
	}
	if first == nil {
		return Start{}, false, nil
	}
	return Start{Unit: unit, Month: first.month, Pos: fmt.Sprintf("%s:%d", name, first.line)}, true, nil
}

func parseTreated(s string) (bool, error) {
	switch strings.ToLower(strings.TrimSpace(s)) {
	case "1", "true", "yes":
		return true, nil
	case "0", "false", "no":
		return false, nil
	}
	return false, fmt.Errorf("treated %q: want 1 or 0 (true/false, yes/no)", s)
}

func csvErr(name string, err error) error {
	var pe *csv.ParseError
	if errors.As(err, &pe) {
		return fmt.Errorf("%w: %s:%d:%d: %v", ErrAssignment, name, pe.Line, pe.Column, pe.Err)
	}
	return fmt.Errorf("%w: %s: %v", ErrAssignment, name, err)
}

// lineAt returns the 1-based line of byte offset off in data.
func lineAt(data []byte, off int64) int {
	off = min(max(off, 0), int64(len(data)))
	return bytes.Count(data[:off], []byte{'\n'}) + 1
}

func readGeoJSONAssignment(data []byte, name string, o ReadOptions) (*Assignment, error) {
	var fc struct {
		Type     string            `json:"type"`
		Name     string            `json:"name"`
		Features []json.RawMessage `json:"features"`
	}
	if err := json.Unmarshal(data, &fc); err != nil {
		var se *json.SyntaxError
		var te *json.UnmarshalTypeError
		switch {
		case errors.As(err, &se):
			return nil, posErr(name, lineAt(data, se.Offset), "not valid JSON: %v", se)
		case errors.As(err, &te):
			return nil, posErr(name, lineAt(data, te.Offset), "not a GeoJSON FeatureCollection: %v", te)
		}
		return nil, fmt.Errorf("%w: %s: %v", ErrAssignment, name, err)
	}
	if fc.Type != "FeatureCollection" {
		return nil, posErr(name, 1, "type %q: want a GeoJSON FeatureCollection", fc.Type)
	}
	offsets := featureOffsets(data)
	a := &Assignment{Event: fc.Name}
	unitProps := unitNames()
	if o.UnitColumn != "" {
		unitProps = []string{o.UnitColumn}
	}
	for i, raw := range fc.Features {
		line := 1
		if i < len(offsets) {
			line = lineAt(data, offsets[i])
		}
		var f struct {
			ID         any            `json:"id"`
			Properties map[string]any `json:"properties"`
		}
		if err := json.Unmarshal(raw, &f); err != nil {
			return nil, posErr(name, line, "feature %d: %v", i+1, err)
		}
		get := func(keys []string) (string, string, bool) {
			for _, k := range keys {
				for pk, v := range f.Properties {
					if strings.EqualFold(pk, k) && v != nil {
						return pk, propString(v), true
					}
				}
			}
			return "", "", false
		}
		_, unit, ok := get(unitProps)
		if !ok && o.UnitColumn == "" && f.ID != nil {
			unit, ok = propString(f.ID), true
		}
		if !ok || unit == "" {
			return nil, posErr(name, line, "feature %d has no unit id (want a property %s)", i+1, strings.Join(unitProps, ", "))
		}
		if _, ev, ok := get(eventNames()); ok && ev != "" {
			a.Event = ev
		}
		if k, end, ok := get(endNames()); ok && end != "" {
			return nil, posErr(name, line, "feature %d (unit %q) has an end (%s = %q): events that switch off are not supported; the staggered estimators need each unit to stay treated from its first month on",
				i+1, unit, k, end)
		}
		_, s, ok := get(startNames())
		if !ok || s == "" {
			continue // never treated
		}
		m, err := parseMonth(s)
		if err != nil {
			return nil, posErr(name, line, "feature %d (unit %q): %v", i+1, unit, err)
		}
		a.Starts = append(a.Starts, Start{Unit: unit, Month: m, Pos: fmt.Sprintf("%s:%d", name, line)})
	}
	return a, nil
}

// propString renders a JSON property value as text: numbers without
// exponent or trailing zeros, strings as they are.
func propString(v any) string {
	switch x := v.(type) {
	case string:
		return strings.TrimSpace(x)
	case float64:
		return strings.TrimSuffix(strings.TrimRight(fmt.Sprintf("%f", x), "0"), ".")
	}
	return fmt.Sprint(v)
}

// featureOffsets returns the byte offset of each feature of the collection's
// top-level features array, for line numbers; nil when it cannot tell.
func featureOffsets(data []byte) []int64 {
	dec := json.NewDecoder(bytes.NewReader(data))
	if t, err := dec.Token(); err != nil || t != json.Delim('{') {
		return nil
	}
	for dec.More() {
		k, err := dec.Token()
		if err != nil {
			return nil
		}
		if k != "features" {
			var skip json.RawMessage
			if dec.Decode(&skip) != nil {
				return nil
			}
			continue
		}
		if t, err := dec.Token(); err != nil || t != json.Delim('[') {
			return nil
		}
		var out []int64
		for dec.More() {
			off := dec.InputOffset()
			for off < int64(len(data)) && strings.ContainsRune(" \t\r\n,", rune(data[off])) {
				off++
			}
			out = append(out, off)
			var skip json.RawMessage
			if dec.Decode(&skip) != nil {
				return out
			}
		}
		return out
	}
	return nil
}
