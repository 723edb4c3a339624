// Package osmfile reads OpenStreetMap files one item at a time: OpenFile
// returns a Reader for a PBF (snapshot or history), OSM XML,
// OsmChange or changeset-metadata file, plain or compressed; package ingest feeds
// readers into its store.
//
// Errors about a file's content are *ParseError values naming the file and a
// Position: byte offset of the PBF block, or line and column in the XML
// formats (1-based, columns in bytes), and the element number. An XML element
// left open is reported at its start tag, whether an outer end tag or the end
// of the file shows it; an end tag matching no open element at that tag.
//
// # Locations
//
// Every visible node version must have a location with latitude in [-90, 90]
// and longitude in [-180, 180] (degrees, WGS 84). A visible node without one,
// or outside that range, is refused with a *ParseError giving the file, the
// position (line and column of the node's start tag in XML; byte offset of
// the PBF block and element number) and the node, unwrapping to ErrFormat.
// This holds for PBF dense and plain nodes (libosmium's undefined location,
// 2147483647 units on both axes, counts as none), OSM XML and OsmChange.
// Changeset bounding boxes must lie in the same range.
//
// Such nodes are refused rather than stored as unlocated because the OSM API
// never writes one (it requires lat and lon on every visible node), so one
// means a damaged or hand-edited file that the user should see and fix; a
// placeholder location would stretch bounding boxes and tile grids (a node
// at 0,0 once made a store span half the globe), and a stored "no location"
// would need a new flag in the version encoding and handling in every
// reader of node positions. Deleted versions (visible="false", OsmChange
// delete blocks, PBF visible=false) have no location in OSM history and are
// accepted without one; they are stored at 0,0, which NodeAt never returns
// because it reports deleted nodes as absent.
package osmfile
