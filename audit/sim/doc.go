// Package sim generates invented OpenStreetMap edit histories with planted
// import effects, so that the estimators in package audit can be checked
// against known answers and used for power analysis.
//
// The world is a grid of districts on an invented island region, Quorvesk
// Isle. Its names, contributors, agencies and datasets are all made up; the
// coordinates lie in open water so that nothing overlaps a real place.
//
// Organic editing follows a Poisson-gamma model: district d has an activity
// rate λ_d drawn from a Gamma distribution with shape k and mean μ, so that
// district-month counts of edits are negative binomial (NB2: mean μ, variance
// μ + μ²/k) before a shared calendar trend with seasonality multiplies them.
// Each edit falls in one classifier layer (geometry, attribute, new_feature,
// deletion) or is a provenance-only (bookkeeping) edit, and each yields
// exactly one event under the counting rules of layers.Event.
//
// Import accounts load buildings (closed ways with address tags) and points
// of interest into a subset of districts in staggered cohorts. Districts are
// chosen with probability growing with their activity level (selection on
// levels), optionally with a diverging pre-trend (selection on trends). After
// a district's import its organic activity in each layer is multiplied by a
// planted factor, at once or growing over event time. Imported features of a
// class lack some tag keys more often than organic ones (planted neglect).
//
// Generate writes four files into a folder:
//
//	history.osh.gz     gzip'd OSM XML full history, sorted by type, id, version
//	changesets.osm.gz  gzip'd changeset metadata XML, sorted by id
//	districts.geojson  RFC 7946 FeatureCollection of district polygons
//	truth.json         planted effects, cohorts, import accounts and changesets,
//	                   the configuration and the generator's own event tallies
//
// The same Config (seed included) gives byte-identical files. Versions are
// rendered month by month into sorted runs on disk and merged at the end, so
// memory holds one month of output plus the compact current state of the
// objects, not the whole history.
package sim
