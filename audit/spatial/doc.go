// Package spatial turns a unit specification into the fixed set of areas a
// study counts edits in: "tiles:Z" for the slippy-map tiles of zoom Z over
// the store's area (github.com/paulmach/orb/maptile), or a GeoJSON file of
// polygons (RFC 7946) checked for validity. Units answer which unit holds a
// point (Locate), and give each unit's id, bound, centroid and area.
//
// Errors about a specification or file wrap ErrUnits; those about one
// feature of a file are *FileError values naming the file and feature.
package spatial
