// Package audit runs the audit of one past import: one request in (the
// import, its units and the study options), the study built once (package
// study) and handed to the estimators (did) and the checklist (checklist),
// and the JSON contract out (Report; README, "The audit JSON"). It also
// audits the past imports an assessment of a proposal names (AssessPast).
//
// The jobs live in sub-packages, each usable on its own: episode (finding
// imports), spatial (units), panel, match, did, study, checklist, proposal,
// markdown (escaping), report (files a reviewer posts) and sim (invented
// worlds). audit reads the store through the small interfaces they declare;
// *ingest.Store meets them and no audit package imports ingest.
//
// Figures from this package are evidence for a community's review of an
// import, not a verdict on it or on the people who made it: imports follow the
// community's import guidelines and local review.
package audit
