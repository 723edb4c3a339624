package audit

import (
	"context"
	"fmt"
	"slices"
	"strings"
	"time"

	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/audit/episode"
)

// Attribution is the licence line every report derived from OpenStreetMap
// data carries (the ODbL's attribution requirement, as the OSM Foundation's
// copyright page asks for it).
const Attribution = "Map data © OpenStreetMap contributors, available under the Open Database Licence (ODbL 1.0): https://www.openstreetmap.org/copyright"

// ChangesetURL is the address of a changeset's page on the OSM website.
func ChangesetURL(id osm.ChangesetID) string {
	return fmt.Sprintf("https://www.openstreetmap.org/changeset/%d", id)
}

// Generator says what made a report: the caller (the command line) fills it.
type Generator struct {
	Version     string    // loadwake's version, from the build info
	CommandLine string    // the exact command, arguments quoted where needed
	Generated   time.Time // when the report was made
	// DataFirst and DataLast are the store's first and last edit.
	DataFirst, DataLast time.Time
	// Invented marks reports on invented data (the demo, simulations).
	Invented bool
}

// Provenance is where a report's figures come from: the "provenance" object
// of the audit JSON (README, "The audit JSON"), shown in every report.
type Provenance struct {
	Tool          string          `json:"tool"`
	Version       string          `json:"version"`
	CommandLine   string          `json:"command_line"`
	Generated     string          `json:"generated"`               // RFC 3339, UTC
	DataRange     [2]string       `json:"data_range"`              // the store's first and last edit, YYYY-MM-DD
	Import        string          `json:"import,omitempty"`        // episode id
	Accounts      []string        `json:"accounts"`                // the import's accounts
	Changesets    []ChangesetLink `json:"changesets"`              // the import's changesets with their pages
	SourceTags    []string        `json:"source_tags"`             // distinct source tags of its changesets
	Documentation []string        `json:"documentation"`           // web addresses found in its changeset tags
	Window        [2]string       `json:"window,omitempty"`        // months actually used, YYYY-MM
	Units         string          `json:"units,omitempty"`         // how the units were given
	Attribution   string          `json:"attribution"`             // the ODbL attribution line
	Invented      bool            `json:"invented_data,omitempty"` // true for invented data (the demo)
	Note          string          `json:"note,omitempty"`          // what could not be found
}

// ChangesetLink is a changeset id with the address of its page.
type ChangesetLink struct {
	ID  osm.ChangesetID `json:"id"`
	URL string          `json:"url"`
}

// ChangesetReader looks up one changeset's metadata; *ingest.Store meets it.
// Sources without it give provenance without source tags and documentation.
type ChangesetReader interface {
	Changeset(ctx context.Context, id osm.ChangesetID) (*osm.Changeset, bool, error)
}

// NewProvenance returns the provenance of a report made by g: the tool
// fields, with no import.
func NewProvenance(g Generator) *Provenance {
	p := &Provenance{Tool: "loadwake", Version: g.Version, CommandLine: g.CommandLine,
		Accounts: []string{}, Changesets: []ChangesetLink{}, SourceTags: []string{}, Documentation: []string{},
		Attribution: Attribution, Invented: g.Invented}
	if p.Version == "" {
		p.Version = "unknown"
	}
	if !g.Generated.IsZero() {
		p.Generated = g.Generated.UTC().Format(time.RFC3339)
	}
	if !g.DataFirst.IsZero() {
		p.DataRange = [2]string{g.DataFirst.UTC().Format(time.DateOnly), g.DataLast.UTC().Format(time.DateOnly)}
	}
	return p
}

// addImport fills the import's part: accounts, changesets with their pages,
// and, when src can look changesets up, their source tags and the web
// addresses in their tags (an import's documentation is usually linked from
// its changesets: common practice of the import guidelines).
func (p *Provenance) addImport(ctx context.Context, src any, ep *episode.Episode) error {
	p.Import = ep.ID
	for _, a := range ep.Accounts {
		p.Accounts = append(p.Accounts, a.Name)
	}
	for _, id := range ep.Changesets {
		p.Changesets = append(p.Changesets, ChangesetLink{ID: id, URL: ChangesetURL(id)})
	}
	cr, ok := src.(ChangesetReader)
	if !ok {
		p.Note = "changeset tags not available from this store"
		return nil
	}
	missing := 0
	for _, id := range ep.Changesets {
		c, found, err := cr.Changeset(ctx, id)
		if err != nil {
			return fmt.Errorf("provenance: changeset %d: %w", id, err)
		}
		if !found {
			missing++
			continue
		}
		for _, t := range c.Tags {
			if t.Key == "source" && t.Value != "" && !slices.Contains(p.SourceTags, t.Value) {
				p.SourceTags = append(p.SourceTags, t.Value)
			}
			for _, f := range strings.Fields(strings.ReplaceAll(t.Value, ";", " ")) {
				if (strings.HasPrefix(f, "https://") || strings.HasPrefix(f, "http://")) && !slices.Contains(p.Documentation, f) {
					p.Documentation = append(p.Documentation, f)
				}
			}
		}
	}
	if missing > 0 {
		p.Note = fmt.Sprintf("%d of %d changesets have no metadata in the store (ingest the changeset dump for their tags)", missing, len(ep.Changesets))
	}
	return nil
}
