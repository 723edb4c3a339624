// Package audit finds past imports in an edit history and measures what
// followed them.
//
// The steps, each usable on its own:
//   - DetectImports groups import changesets into episodes (imports.go), by the
//     import rules of a rules.RuleSet or by changesets and accounts a user names;
//   - spatial units, panels of follow-on activity per unit and month, matching
//     of import areas with untouched areas, and the difference-in-differences
//     estimators (plain and staggered) compare what happened next;
//   - checklists list attribute keys imported features went without, and a
//     proposal is assessed against past imports.
//
// audit reads history through small interfaces it declares (HistorySource and
// the readers of the other steps); *ingest.Store meets them, and audit does not
// import ingest. It uses the layers and rules packages.
//
// Figures from this package are evidence for a community's review of an
// import, not a verdict on it or on the people who made it: imports follow the
// community's import guidelines and local review.
package audit
