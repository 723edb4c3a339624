package rules

import (
	"errors"
	"fmt"
	"math"
	"path"
	"regexp"
	"sort"
	"strings"
	"unicode/utf8"

	"go.yaml.in/yaml/v4"
)

// Limits checked on thresholds.
const maxGroupGapDays = 3650

// decoder walks a rule file's YAML nodes, filling a spec and collecting every
// problem with its position instead of stopping at the first.
type decoder struct {
	file            string
	probs           Problems
	endLine, endCol int // just after the file's last character
}

// decode parses data into a spec. The spec is complete only when no problem
// was found.
func decode(file string, data []byte) (spec, Problems) {
	d := &decoder{file: file}
	d.endLine, d.endCol = endOf(data)
	var s spec
	var doc yaml.Node
	if err := yaml.Unmarshal(data, &doc); err != nil {
		d.syntax(data, err)
		return s, d.probs
	}
	if doc.Kind == 0 || len(doc.Content) == 0 {
		d.probs = append(d.probs, Problem{File: file, Line: 1, Column: 1, Msg: "rule file is empty"})
		return s, d.probs
	}
	d.top(doc.Content[0], &s)
	sort.SliceStable(d.probs, func(i, j int) bool {
		a, b := d.probs[i], d.probs[j]
		return a.Line < b.Line || a.Line == b.Line && a.Column < b.Column
	})
	return s, d.probs
}

// syntax records a YAML error that stops parsing. go.yaml.in/yaml/v4 reports
// it as a *yaml.LoadError whose Mark is the 1-based line and column where the
// parser gave up, and whose ContextMark, when set, is where the construct it
// was reading began ("while parsing a flow sequence" at line 2, column 4).
// The problem is placed at Mark; the context goes into the message.
func (d *decoder) syntax(data []byte, err error) {
	var le *yaml.LoadError
	if !errors.As(err, &le) {
		var les *yaml.LoadErrors
		if errors.As(err, &les) && len(les.Errors) > 0 {
			le = les.Errors[0]
		}
	}
	if le == nil {
		d.probs = append(d.probs, Problem{File: d.file, Msg: "YAML: " + strings.TrimPrefix(err.Error(), "yaml: ")})
		return
	}
	msg := "YAML syntax: " + le.Message
	if le.ContextMsg != "" && le.ContextMark.Line > 0 && le.ContextMark != le.Mark {
		msg += fmt.Sprintf(" (%s that starts at line %d, column %d)", le.ContextMsg, le.ContextMark.Line, le.ContextMark.Column)
	}
	line, col := le.Mark.Line, le.Mark.Column
	if line == 0 && le.Stage == yaml.ReaderStage {
		// Errors of the character reader (a control character, bad
		// UTF-8) carry only the byte offset.
		line, col = posOf(data, le.Mark.Index)
	}
	d.add(line, col, msg)
}

// endOf returns the 1-based line and column just after the last character of
// data, counted as posOf does.
func endOf(data []byte) (line, col int) {
	return posOf(data, len(data))
}

// posOf returns the 1-based line and column of byte offset off in data,
// counting as yaml does: columns in characters, and a line break at LF, at a
// CR not followed by LF, and at NEL, LS and PS (YAML 1.1 line breaks).
func posOf(data []byte, off int) (line, col int) {
	off = max(0, min(off, len(data)))
	line, col = 1, 1
	for i := 0; i < off; {
		r, size := utf8.DecodeRune(data[i:])
		switch {
		case r == '\n', r == '\u0085', r == '\u2028', r == '\u2029',
			r == '\r' && (i+1 >= len(data) || data[i+1] != '\n'):
			line, col = line+1, 1
		default:
			col++
		}
		i += size
	}
	return line, col
}

func (d *decoder) addf(n *yaml.Node, format string, args ...any) {
	d.add(n.Line, n.Column, fmt.Sprintf(format, args...))
}

// add records a problem. At the end of the input libyaml moves to a fresh
// line even when the last line has no newline, and places a syntax error or
// an empty node ("---" alone) there; such positions point at the real end.
func (d *decoder) add(line, col int, msg string) {
	if line > d.endLine || line == d.endLine && col > d.endCol {
		line, col = d.endLine, d.endCol
	}
	d.probs = append(d.probs, Problem{File: d.file, Line: line, Column: col, Msg: msg})
}

// deref follows an alias to the node it names.
func deref(n *yaml.Node) *yaml.Node {
	for n != nil && n.Kind == yaml.AliasNode && n.Alias != nil {
		n = n.Alias
	}
	return n
}

// kindName says what a node holds, for messages.
func kindName(n *yaml.Node) string {
	switch n.Kind {
	case yaml.MappingNode:
		return "a mapping"
	case yaml.SequenceNode:
		return "a list"
	case yaml.ScalarNode:
		switch n.ShortTag() {
		case "!!null":
			return "empty"
		case "!!int", "!!float":
			return "a number"
		case "!!bool":
			return "true/false"
		}
		return "a string"
	}
	return "something else"
}

// fields checks that n is a mapping with only the known fields, each at most
// once, and returns the value nodes by field name. The key nodes are returned
// too, for positions.
func (d *decoder) fields(n *yaml.Node, where string, known ...string) (vals, keys map[string]*yaml.Node, ok bool) {
	if n.Kind != yaml.MappingNode {
		d.addf(n, "%s must be a mapping, not %s", where, kindName(n))
		return nil, nil, false
	}
	vals = make(map[string]*yaml.Node, len(n.Content)/2)
	keys = make(map[string]*yaml.Node, len(n.Content)/2)
	for i := 0; i+1 < len(n.Content); i += 2 {
		k, v := n.Content[i], deref(n.Content[i+1])
		name := k.Value
		if !contains(known, name) {
			d.addf(k, "unknown field %q in %s (known: %s)", name, where, strings.Join(known, ", "))
			continue
		}
		if prev, dup := keys[name]; dup {
			d.addf(k, "field %q repeated in %s (first at line %d)", name, where, prev.Line)
			continue
		}
		vals[name], keys[name] = v, k
	}
	return vals, keys, true
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

// require reports fields missing from a mapping.
func (d *decoder) require(n *yaml.Node, vals map[string]*yaml.Node, where string, names ...string) {
	for _, name := range names {
		if _, ok := vals[name]; !ok {
			d.addf(n, "%s lacks field %q", where, name)
		}
	}
}

// str reads a string scalar.
func (d *decoder) str(n *yaml.Node, what string) (string, bool) {
	if n.Kind != yaml.ScalarNode || n.ShortTag() != "!!str" {
		d.addf(n, "%s must be a string, not %s", what, kindName(n))
		return "", false
	}
	return n.Value, true
}

// text reads any non-empty scalar as its text (tag values such as 1 or yes).
func (d *decoder) text(n *yaml.Node, what string) (string, bool) {
	if n.Kind != yaml.ScalarNode || n.ShortTag() == "!!null" {
		d.addf(n, "%s must be a string, not %s", what, kindName(n))
		return "", false
	}
	return n.Value, true
}

func (d *decoder) integer(n *yaml.Node, what string) (int64, bool) {
	var v int64
	if n.Kind != yaml.ScalarNode || n.ShortTag() != "!!int" || n.Decode(&v) != nil {
		d.addf(n, "%s must be a whole number, not %s", what, kindName(n))
		return 0, false
	}
	return v, true
}

func (d *decoder) number(n *yaml.Node, what string) (float64, bool) {
	var v float64
	tag := n.ShortTag()
	if n.Kind != yaml.ScalarNode || (tag != "!!int" && tag != "!!float") || n.Decode(&v) != nil || math.IsNaN(v) || math.IsInf(v, 0) {
		d.addf(n, "%s must be a number, not %s", what, kindName(n))
		return 0, false
	}
	return v, true
}

func (d *decoder) boolean(n *yaml.Node, what string) (bool, bool) {
	var v bool
	if n.Kind != yaml.ScalarNode || n.ShortTag() != "!!bool" || n.Decode(&v) != nil {
		d.addf(n, "%s must be true or false, not %s", what, kindName(n))
		return false, false
	}
	return v, true
}

// list checks that n is a list and returns its items.
func (d *decoder) list(n *yaml.Node, what string) ([]*yaml.Node, bool) {
	if n.Kind != yaml.SequenceNode {
		d.addf(n, "%s must be a list, not %s", what, kindName(n))
		return nil, false
	}
	items := make([]*yaml.Node, len(n.Content))
	for i, c := range n.Content {
		items[i] = deref(c)
	}
	return items, true
}

func (d *decoder) strList(n *yaml.Node, what string) []string {
	items, ok := d.list(n, what)
	if !ok {
		return nil
	}
	out := make([]string, 0, len(items))
	for _, it := range items {
		if s, ok := d.str(it, what+" item"); ok {
			out = append(out, s)
		}
	}
	return out
}

func (d *decoder) idList(n *yaml.Node, what string) []int64 {
	items, ok := d.list(n, what)
	if !ok {
		return nil
	}
	if len(items) == 0 {
		d.addf(n, "%s is empty", what)
	}
	out := make([]int64, 0, len(items))
	for _, it := range items {
		v, ok := d.integer(it, what+" item")
		if !ok {
			continue
		}
		if v <= 0 {
			d.addf(it, "%s item %d must be positive", what, v)
			continue
		}
		out = append(out, v)
	}
	return out
}

func (d *decoder) top(n *yaml.Node, s *spec) {
	n = deref(n)
	vals, _, ok := d.fields(n, "the rule file", "format", "feature_classes", "key_families", "import_detection")
	if !ok {
		return
	}
	d.require(n, vals, "the rule file", "feature_classes", "key_families", "import_detection")
	s.Format = 1
	if v, ok := vals["format"]; ok {
		if f, ok := d.integer(v, "format"); ok && f != 1 {
			d.addf(v, "format %d is not known; this loadwake reads format 1", f)
		}
	}
	if v, ok := vals["feature_classes"]; ok {
		d.classes(v, &s.FeatureClasses)
	}
	if v, ok := vals["key_families"]; ok {
		s.KeyFamilies = d.families(v)
	}
	if v, ok := vals["import_detection"]; ok {
		d.detection(v, &s.ImportDetection)
	}
}

func (d *decoder) classes(n *yaml.Node, c *classesSpec) {
	vals, _, ok := d.fields(n, "feature_classes", "ignore_values", "keys")
	if !ok {
		return
	}
	d.require(n, vals, "feature_classes", "keys")
	c.IgnoreValues = []string{}
	if v, ok := vals["ignore_values"]; ok {
		c.IgnoreValues = d.strList(v, "ignore_values")
	}
	v, ok := vals["keys"]
	if !ok {
		return
	}
	items, ok := d.list(v, "feature_classes keys")
	if !ok {
		return
	}
	if len(items) == 0 {
		d.addf(v, "feature_classes keys is empty; at least one class key is needed")
	}
	seen := map[string]int{}
	for _, it := range items {
		kv, _, ok := d.fields(it, "a class key", "key", "detail", "values")
		if !ok {
			continue
		}
		d.require(it, kv, "a class key", "key", "detail")
		var ck classKeySpec
		if k, ok := kv["key"]; ok {
			if key, ok := d.str(k, "class key"); ok {
				switch {
				case key == "":
					d.addf(k, "class key is empty")
				case seen[key] > 0:
					d.addf(k, "class key %q repeated (first at line %d)", key, seen[key])
				default:
					seen[key] = k.Line
				}
				ck.Key = key
			}
		}
		if dn, ok := kv["detail"]; ok {
			if det, ok := d.str(dn, "detail"); ok {
				if det != detailValue && det != detailKey && det != detailListed {
					d.addf(dn, "detail %q is not one of value, key, listed", det)
				}
				ck.Detail = det
			}
		}
		if vn, ok := kv["values"]; ok {
			ck.Values = d.strList(vn, "values")
			if ck.Detail != "" && ck.Detail != detailListed {
				d.addf(vn, "values are used only with detail: listed, not %s", ck.Detail)
			}
		} else if ck.Detail == detailListed {
			d.addf(it, "detail: listed needs a values list")
		}
		if ck.Detail == detailListed && kv["values"] != nil && len(ck.Values) == 0 {
			d.addf(kv["values"], "values is empty")
		}
		c.Keys = append(c.Keys, ck)
	}
}

func (d *decoder) families(n *yaml.Node) []familySpec {
	items, ok := d.list(n, "key_families")
	if !ok {
		return nil
	}
	out := make([]familySpec, 0, len(items))
	seen := map[string]int{}
	for _, it := range items {
		fv, _, ok := d.fields(it, "a key family", "name", "provenance", "keys")
		if !ok {
			continue
		}
		d.require(it, fv, "a key family", "name", "keys")
		var f familySpec
		if nn, ok := fv["name"]; ok {
			if name, ok := d.str(nn, "family name"); ok {
				switch {
				case name == "":
					d.addf(nn, "family name is empty")
				case name == Other:
					d.addf(nn, "family name %q is reserved for keys no family matches", Other)
				case seen[name] > 0:
					d.addf(nn, "family name %q repeated (first at line %d)", name, seen[name])
				default:
					seen[name] = nn.Line
				}
				f.Name = name
			}
		}
		if pn, ok := fv["provenance"]; ok {
			f.Provenance, _ = d.boolean(pn, "provenance")
		}
		if kn, ok := fv["keys"]; ok {
			if keys, ok := d.list(kn, "family keys"); ok {
				if len(keys) == 0 {
					d.addf(kn, "family %q has no keys", f.Name)
				}
				for _, k := range keys {
					p, ok := d.str(k, "key pattern")
					if !ok {
						continue
					}
					if err := checkPattern(p); err != nil {
						d.addf(k, "key pattern %q: %v", p, err)
						continue
					}
					f.Keys = append(f.Keys, p)
				}
			}
		}
		out = append(out, f)
	}
	return out
}

// checkPattern reports an empty or malformed key pattern.
func checkPattern(p string) error {
	if p == "" {
		return fmt.Errorf("empty pattern")
	}
	if _, err := path.Match(p, ""); err != nil {
		return fmt.Errorf("bad glob (Go path.Match syntax): %w", err)
	}
	return nil
}

func (d *decoder) detection(n *yaml.Node, s *detectionSpec) {
	vals, _, ok := d.fields(n, "import_detection", "group_gap_days", "matchers")
	if !ok {
		return
	}
	d.require(n, vals, "import_detection", "group_gap_days", "matchers")
	if v, ok := vals["group_gap_days"]; ok {
		if g, ok := d.number(v, "group_gap_days"); ok {
			if g < 0 || g > maxGroupGapDays {
				d.addf(v, "group_gap_days %v is out of range 0 to %d", g, maxGroupGapDays)
			}
			s.GroupGapDays = g
		}
	}
	v, ok := vals["matchers"]
	if !ok {
		return
	}
	items, ok := d.list(v, "matchers")
	if !ok {
		return
	}
	seen := map[string]int{}
	for _, it := range items {
		mv, _, ok := d.fields(it, "a matcher", "name", "changeset_tags", "account_names", "account_ids",
			"changeset_ids", "min_changes", "min_creation_share")
		if !ok {
			continue
		}
		d.require(it, mv, "a matcher", "name")
		var m matcherSpec
		if nn, ok := mv["name"]; ok {
			if name, ok := d.str(nn, "matcher name"); ok {
				switch {
				case name == "":
					d.addf(nn, "matcher name is empty")
				case seen[name] > 0:
					d.addf(nn, "matcher name %q repeated (first at line %d)", name, seen[name])
				default:
					seen[name] = nn.Line
				}
				m.Name = name
			}
		}
		conditions := 0
		if tn, ok := mv["changeset_tags"]; ok {
			conditions++
			m.ChangesetTags = d.tagConds(tn)
		}
		if an, ok := mv["account_names"]; ok {
			conditions++
			items, ok := d.list(an, "account_names")
			if ok && len(items) == 0 {
				d.addf(an, "account_names is empty")
			}
			for _, a := range items {
				re, ok := d.str(a, "account name pattern")
				if !ok {
					continue
				}
				if _, err := regexp.Compile(re); err != nil {
					d.addf(a, "bad regular expression %q: %v", re, unwrapRE(err))
					continue
				}
				m.AccountNames = append(m.AccountNames, re)
			}
		}
		if an, ok := mv["account_ids"]; ok {
			conditions++
			m.AccountIDs = d.idList(an, "account_ids")
		}
		if cn, ok := mv["changeset_ids"]; ok {
			conditions++
			m.ChangesetIDs = d.idList(cn, "changeset_ids")
		}
		if cn, ok := mv["min_changes"]; ok {
			conditions++
			if v, ok := d.integer(cn, "min_changes"); ok {
				if v < 1 || v > math.MaxInt32 {
					d.addf(cn, "min_changes %d is out of range 1 to %d", v, math.MaxInt32)
				}
				m.MinChanges = int(v)
			}
		}
		if sn, ok := mv["min_creation_share"]; ok {
			conditions++
			if v, ok := d.number(sn, "min_creation_share"); ok {
				if v < 0 || v > 1 {
					d.addf(sn, "min_creation_share %v is out of range 0 to 1", v)
				}
				m.MinCreationShare = &v
			}
		}
		if conditions == 0 {
			d.addf(it, "matcher %q has no conditions; it would match every changeset", m.Name)
		}
		s.Matchers = append(s.Matchers, m)
	}
}

func (d *decoder) tagConds(n *yaml.Node) []tagCondSpec {
	items, ok := d.list(n, "changeset_tags")
	if !ok {
		return nil
	}
	if len(items) == 0 {
		d.addf(n, "changeset_tags is empty")
	}
	out := make([]tagCondSpec, 0, len(items))
	for _, it := range items {
		tv, _, ok := d.fields(it, "a changeset tag condition", "key", "equals", "matches")
		if !ok {
			continue
		}
		d.require(it, tv, "a changeset tag condition", "key")
		var c tagCondSpec
		if kn, ok := tv["key"]; ok {
			if k, ok := d.text(kn, "tag key"); ok {
				if k == "" {
					d.addf(kn, "tag key is empty")
				}
				c.Key = k
			}
		}
		en, hasEq := tv["equals"]
		mn, hasRe := tv["matches"]
		if hasEq && hasRe {
			d.addf(mn, "a tag condition takes equals or matches, not both")
		}
		if hasEq {
			if v, ok := d.text(en, "equals"); ok {
				if v == "" {
					d.addf(en, "equals is empty; leave it out to require only that the tag is present")
				}
				c.Equals = v
			}
		}
		if hasRe {
			if v, ok := d.str(mn, "matches"); ok {
				if _, err := regexp.Compile(v); err != nil {
					d.addf(mn, "bad regular expression %q: %v", v, unwrapRE(err))
				} else if v == "" {
					d.addf(mn, "matches is empty; leave it out to require only that the tag is present")
				}
				c.Matches = v
			}
		}
		out = append(out, c)
	}
	return out
}

// unwrapRE shortens regexp's "error parsing regexp: " prefix.
func unwrapRE(err error) string {
	return strings.TrimPrefix(err.Error(), "error parsing regexp: ")
}
