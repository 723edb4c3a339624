// Package episode finds past imports in an edit history: it matches
// changesets against the import rules of a rules.RuleSet (changeset tags such
// as import=yes, dedicated import accounts, large creation-only changesets),
// counts what each changeset created, modified and deleted, and groups the
// matched changesets into episodes by account and source while they follow
// each other within the grouping gap. A user may instead name an import by
// its changesets or account.
//
// Episodes are candidates to check against an import's documentation, not
// findings about people (Caution). The history is read through Source, which
// *ingest.Store meets.
package episode
