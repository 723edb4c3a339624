// Package retention follows the accounts that started editing in a study's
// areas: whether newcomers whose first edit fell in import areas after the
// import kept editing as long as newcomers in the matched comparison areas,
// against the same comparison before the import.
//
// Scan reads the store's classified events once, in time order, and finds
// each newcomer: an account counted once, in the unit of its first located
// event (its first edit with a position inside a study unit; an account whose
// first located edit falls outside the study's treated and control units is
// not counted, whatever it edits later), with that edit's time as its start.
// Accounts whose first edit is in an import's changeset, and the import's own
// accounts, are not newcomers. An account's survival time is from its first
// to its last edit anywhere in the store; it counts as stopped when its last
// edit lies more than Options.Gap months before the data end, and as
// censored at the data end otherwise.
//
// Estimate turns newcomers into the figures of the retention section: for
// import and comparison areas, before and after the import, the share still
// editing 3, 6, 12 and 24 months after the first edit (among newcomers
// followed that long), Kaplan–Meier curves with log-log bands, edits in the
// first year, the difference-in-differences of the 12-month share and of
// first-year edits with a cluster bootstrap by unit, a log-rank test and a
// Cox hazard ratio stratified by cohort with standard errors clustered by
// unit (package survival). With staggered imports each cohort of import areas
// is compared with all comparison areas around its own start (stacked), so a
// comparison-area newcomer can enter more than one cohort's comparison.
//
// The results are about areas and groups of accounts, never about a person:
// Result holds no account name or id.
package retention
