// Package spatial turns a unit specification into the fixed set of areas a
// study counts edits in: "tiles:Z" for the slippy-map tiles of zoom Z over
// the store's area (github.com/paulmach/orb/maptile), a GeoJSON file of
// polygons (RFC 7946) checked for validity, coordinate system, axis order,
// overlaps and fit with the store's area, or "admin:LEVEL" for the
// boundary=administrative relations of the store itself, assembled from
// their member ways as of a time (github.com/paulmach/osm/osmgeojson).
// Units answer which unit holds a point (Locate), and give each unit's id,
// name, bound, centroid and area.
//
// The package reads the store through VersionReader, which *ingest.Store
// meets; it imports no project package.
//
// Errors about a specification or file wrap ErrUnits; those about one
// feature of a file are *FileError values naming the file and feature;
// boundary relations that cannot be assembled are listed in an
// *AssemblyError.
package spatial
