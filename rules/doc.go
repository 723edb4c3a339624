// Package rules reads loadwake's rule files: which tags name a feature's class,
// which key families attribute edits fall into, and which changesets were part
// of an import.
//
// A rule file is YAML with three sections, feature_classes, key_families and
// import_detection; the built-in defaults (rules/default.yaml, printed by
// `loadwake rules show`) describe every field in comments. Parse and Load check
// a file completely and return a *Problems listing every problem with its line
// and column, never only the first; the problems unwrap to ErrInvalid.
// A YAML syntax error stops the check; it is placed where the parser gave up
// (go.yaml.in/yaml/v4's LoadError mark, 1-based, columns in characters), and
// the construct it was reading is named with its own start position.
//
// A *RuleSet is immutable once built and safe for concurrent use. Hash gives a
// stable digest of its content, so derived data can record which rules made it.
//
// The package uses no other loadwake package.
package rules
