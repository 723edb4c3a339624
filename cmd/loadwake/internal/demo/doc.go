// Package demo is the pipeline of `loadwake demo`: an invented region's
// history made by audit/sim, ingested and classified into a fresh store, its
// largest import found, audited over the districts and given its checklist,
// an invented follow-up proposal assessed, and the reports written (Run). All
// its data are invented; none of it is to be uploaded to OpenStreetMap.
package demo
