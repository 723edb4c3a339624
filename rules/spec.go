package rules

// The spec types mirror a rule file's fields after validation. They are the
// canonical content: Hash digests their JSON form and Canonical prints them as
// YAML, so comments, spacing and field order in the file do not matter.

type spec struct {
	Format          int           `json:"format" yaml:"format"`
	FeatureClasses  classesSpec   `json:"feature_classes" yaml:"feature_classes"`
	KeyFamilies     []familySpec  `json:"key_families" yaml:"key_families"`
	ImportDetection detectionSpec `json:"import_detection" yaml:"import_detection"`
}

type classesSpec struct {
	IgnoreValues []string       `json:"ignore_values" yaml:"ignore_values,flow"`
	Keys         []classKeySpec `json:"keys" yaml:"keys"`
}

type classKeySpec struct {
	Key    string   `json:"key" yaml:"key"`
	Detail string   `json:"detail" yaml:"detail"`
	Values []string `json:"values,omitempty" yaml:"values,omitempty,flow"`
}

type familySpec struct {
	Name       string   `json:"name" yaml:"name"`
	Provenance bool     `json:"provenance,omitempty" yaml:"provenance,omitempty"`
	Keys       []string `json:"keys" yaml:"keys"`
}

type detectionSpec struct {
	GroupGapDays float64       `json:"group_gap_days" yaml:"group_gap_days"`
	Matchers     []matcherSpec `json:"matchers" yaml:"matchers"`
}

type matcherSpec struct {
	Name             string        `json:"name" yaml:"name"`
	ChangesetTags    []tagCondSpec `json:"changeset_tags,omitempty" yaml:"changeset_tags,omitempty"`
	AccountNames     []string      `json:"account_names,omitempty" yaml:"account_names,omitempty"`
	AccountIDs       []int64       `json:"account_ids,omitempty" yaml:"account_ids,omitempty,flow"`
	ChangesetIDs     []int64       `json:"changeset_ids,omitempty" yaml:"changeset_ids,omitempty,flow"`
	MinChanges       int           `json:"min_changes,omitempty" yaml:"min_changes,omitempty"`
	MinCreationShare *float64      `json:"min_creation_share,omitempty" yaml:"min_creation_share,omitempty"`
}

type tagCondSpec struct {
	Key     string `json:"key" yaml:"key"`
	Equals  string `json:"equals,omitempty" yaml:"equals,omitempty"`
	Matches string `json:"matches,omitempty" yaml:"matches,omitempty"`
}

// Detail values of a class key.
const (
	detailValue  = "value"
	detailKey    = "key"
	detailListed = "listed"
)
