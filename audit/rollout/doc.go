// Package rollout designs a proposed import as a randomized staggered
// rollout: the proposal's units are dealt to waves at random, stratified by
// their past activity and optionally blocked by a unit property (Assign,
// reproducible from its seed); the plan says when each wave starts, how alike
// the waves are (balance), what the evaluation could detect (audit/power),
// where the interim looks' boundaries lie (audit/sequential), and is written
// as CSV, JSON and GeoJSON with the proposal split into one OsmChange file
// per wave, each under the API's changeset limit (Make, WriteWaves). The
// pre-registration document, in Markdown and MediaWiki, states all of it
// before the first upload (WritePreregistration). A plan is a proposal for
// the community's review: community approval, the import guidelines and
// local review come first.
package rollout
