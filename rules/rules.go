package rules

import (
	"bytes"
	"crypto/sha256"
	_ "embed"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"os"
	"path"
	"slices"
	"strings"

	"github.com/paulmach/osm"
	"go.yaml.in/yaml/v4"
)

// defaultYAML is the rule file built into the program.
//
//go:embed default.yaml
var defaultYAML []byte

// DefaultName is the file name problems in the built-in rules would carry.
const DefaultName = "default.yaml"

// Other is the family of keys no family matches.
const Other = "other"

// RuleSet is a validated rule file. It is immutable and safe for concurrent use.
type RuleSet struct {
	name string
	spec spec
	hash string

	ignore   map[string]bool
	classes  []classRule
	classIdx map[string]int // class key -> priority (index in classes)

	families   []family
	exact      map[string]int // exact key -> first family index
	prefixes   map[string]int // "name:*" style patterns by prefix -> first family index
	prefixLens []int          // distinct prefix lengths, ascending
	suffixes   []keyPattern   // "*:source" style patterns; pattern holds the suffix
	globs      []keyPattern   // other path.Match globs
	imports    ImportRules
}

type classRule struct {
	key    string
	detail string
	star   string            // "key=*"
	kept   map[string]string // listed values -> "key=value"
}

type family struct {
	name       string
	provenance bool
}

type keyPattern struct {
	pattern string // a path.Match glob, or the suffix for suffixes
	family  int
}

// Default returns the built-in rules, parsed anew on each call.
func Default() *RuleSet {
	r, err := Parse(DefaultName, defaultYAML)
	if err != nil {
		// The embedded file is part of the program and tested; this is a build defect.
		panic(fmt.Sprintf("rules: built-in rules do not validate: %v", err))
	}
	return r
}

// DefaultYAML returns a copy of the built-in rule file, comments included.
func DefaultYAML() []byte {
	return bytes.Clone(defaultYAML)
}

// Load reads and parses the rule file at path. A file that does not validate
// gives a *Problems; a file that cannot be read gives an error naming it.
func Load(path string) (*RuleSet, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("rules: read rule file: %w", err)
	}
	return Parse(path, data)
}

// Parse validates a rule file's content; name is used in problem positions.
// When anything is wrong the error is a *Problems listing every problem.
func Parse(name string, data []byte) (*RuleSet, error) {
	s, probs := decode(name, data)
	if len(probs) > 0 {
		return nil, &probs
	}
	return build(name, s)
}

func build(name string, s spec) (*RuleSet, error) {
	canon, err := json.Marshal(s)
	if err != nil {
		return nil, fmt.Errorf("rules: %s: canonical form: %w", name, err)
	}
	sum := sha256.Sum256(canon)
	r := &RuleSet{
		name:     name,
		spec:     s,
		hash:     hex.EncodeToString(sum[:]),
		ignore:   make(map[string]bool, len(s.FeatureClasses.IgnoreValues)),
		classIdx: make(map[string]int, len(s.FeatureClasses.Keys)),
		exact:    map[string]int{},
		prefixes: map[string]int{},
	}
	for _, v := range s.FeatureClasses.IgnoreValues {
		r.ignore[v] = true
	}
	for i, k := range s.FeatureClasses.Keys {
		c := classRule{key: k.Key, detail: k.Detail, star: k.Key + "=*"}
		if k.Detail == detailListed {
			c.kept = make(map[string]string, len(k.Values))
			for _, v := range k.Values {
				c.kept[v] = k.Key + "=" + v
			}
		}
		r.classes = append(r.classes, c)
		r.classIdx[k.Key] = i
	}
	for i, f := range s.KeyFamilies {
		r.families = append(r.families, family{name: f.Name, provenance: f.Provenance})
		for _, p := range f.Keys {
			switch {
			case !hasMeta(p):
				if _, dup := r.exact[p]; !dup {
					r.exact[p] = i
				}
			case strings.HasSuffix(p, "*") && !hasMeta(p[:len(p)-1]):
				pre := p[:len(p)-1]
				if _, dup := r.prefixes[pre]; !dup {
					r.prefixes[pre] = i
					if !slices.Contains(r.prefixLens, len(pre)) {
						r.prefixLens = append(r.prefixLens, len(pre))
					}
				}
			case strings.HasPrefix(p, "*") && !hasMeta(p[1:]):
				r.suffixes = append(r.suffixes, keyPattern{pattern: p[1:], family: i})
			default:
				r.globs = append(r.globs, keyPattern{pattern: p, family: i})
			}
		}
	}
	slices.Sort(r.prefixLens)
	r.imports, err = compileImports(s.ImportDetection)
	if err != nil {
		return nil, fmt.Errorf("rules: %s: %w", name, err)
	}
	return r, nil
}

// hasMeta reports whether p holds a path.Match special character.
func hasMeta(p string) bool {
	return strings.ContainsAny(p, `*?[\`)
}

// Name returns the file name the rules were read from (DefaultName for the built-in ones).
func (r *RuleSet) Name() string { return r.name }

// Hash returns the hex SHA-256 of the rules' canonical content. Comments,
// spacing and field order do not change it; any rule does.
func (r *RuleSet) Hash() string { return r.hash }

// Canonical returns the rules as a YAML file without comments, defaults filled
// in: what the program works with. Parse accepts it and gives the same Hash.
func (r *RuleSet) Canonical() []byte {
	// go-yaml v3's layout: two-space indent, no line wrapping.
	b, err := yaml.Dump(r.spec, yaml.WithV3Defaults(), yaml.WithIndent(2), yaml.WithLineWidth(-1))
	if err != nil {
		// Encoding plain structs of strings and numbers does not fail.
		return nil
	}
	return b
}

// Class returns the feature class of a version's tags: the highest-priority
// class key present, as "key=value" or "key=*" as its detail says. It returns
// "" when no class key is present with a value other than an ignored one.
func (r *RuleSet) Class(tags osm.Tags) string {
	best := len(r.classes)
	value := ""
	for _, t := range tags {
		i, ok := r.classIdx[t.Key]
		if !ok || i >= best || t.Value == "" || r.ignore[t.Value] {
			continue
		}
		best, value = i, t.Value
	}
	if best == len(r.classes) {
		return ""
	}
	c := &r.classes[best]
	switch c.detail {
	case detailValue:
		return c.key + "=" + value
	case detailListed:
		if s, ok := c.kept[value]; ok {
			return s
		}
	}
	return c.star
}

// IsClassKey reports whether key is one of the feature class keys.
func (r *RuleSet) IsClassKey(key string) bool {
	_, ok := r.classIdx[key]
	return ok
}

// ClassKeys returns the class keys in priority order.
func (r *RuleSet) ClassKeys() []string {
	out := make([]string, len(r.classes))
	for i, c := range r.classes {
		out[i] = c.key
	}
	return out
}

// Family returns the key family of a tag key, the first family in file order
// with a matching pattern, and whether that family holds provenance
// (bookkeeping) keys. It returns (Other, false) when no family matches.
func (r *RuleSet) Family(key string) (family string, provenance bool) {
	best := len(r.families)
	if i, ok := r.exact[key]; ok {
		best = i
	}
	for _, n := range r.prefixLens {
		if n > len(key) {
			break
		}
		if i, ok := r.prefixes[key[:n]]; ok && i < best {
			best = i
		}
	}
	for _, p := range r.suffixes {
		// path.Match's * stops at '/', so "*:source" does not match "a/b:source".
		if p.family < best && strings.HasSuffix(key, p.pattern) && !strings.Contains(key[:len(key)-len(p.pattern)], "/") {
			best = p.family
		}
	}
	for _, g := range r.globs {
		if g.family < best {
			if ok, _ := path.Match(g.pattern, key); ok {
				best = g.family
			}
		}
	}
	if best == len(r.families) {
		return Other, false
	}
	f := r.families[best]
	return f.name, f.provenance
}

// FamilyNames returns the families' names in file order, without Other.
func (r *RuleSet) FamilyNames() []string {
	out := make([]string, len(r.families))
	for i, f := range r.families {
		out[i] = f.name
	}
	return out
}

// Imports returns the import detection rules.
func (r *RuleSet) Imports() ImportRules { return r.imports }
