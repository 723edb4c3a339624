// Package proposal reads a proposed import (OSM XML, OsmChange, PBF objects
// or GeoJSON), profiles it (classes, key completeness, the changesets it
// needs under the API's 10,000-change limit), finds likely duplicates among
// the store's features, and compares it with the most similar past imports.
//
// An assessment is evidence for the community's review of a proposal; it
// ends with the cautions of the import guidelines (Cautions).
package proposal
