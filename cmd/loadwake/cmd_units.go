package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"text/tabwriter"
	"time"

	"github.com/paulmach/orb/geojson"
	"github.com/spf13/cobra"

	"github.com/loadwake/loadwake/audit/spatial"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/loadwake/loadwake/ingest"
)

// The store is what admin:LEVEL units are read from.
var _ spatial.VersionReader = (*ingest.Store)(nil)

// unitsOptions holds the flags of `loadwake units`.
type unitsOptions struct {
	units    string // unit specification
	unitID   string // id property of a GeoJSON unit file
	unitName string // name property of a GeoJSON unit file
	at       string // YYYY-MM-DD the boundaries are taken at; empty for the latest
	geojson  string // output file; "-" for stdout
}

func newUnitsCommand(g *cli.Globals) *cobra.Command {
	var o unitsOptions
	cmd := &cobra.Command{
		Use:   "units --units SPEC --geojson FILE",
		Short: "Write the spatial units a study would count in, as GeoJSON",
		Long: `units builds the spatial units of --units over the store, exactly as a study
would, and writes them as a GeoJSON FeatureCollection (RFC 7946): one feature
per unit with properties id, name and area_m2 (on a sphere of radius
6378137 m), so that the units can be looked at in a GIS before an audit.
"-" writes to stdout.

SPEC is "tiles:Z", a GeoJSON file of polygons, or
"admin:LEVEL[,name=GLOB][,within=NAME]": the boundary=administrative relations
of that admin_level in the store, assembled from their member ways as they were
at --at (default: the latest versions; snapshot stores hold only those).
within= keeps the boundaries lying in the named boundary (or rID for a relation
id); name= filters by name tag (glob, case-insensitive).

Administrative boundaries are not always the areas an import affects; check
the units against the community's import guidelines and local knowledge.`,
		Args: cli.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			if o.units == "" || o.geojson == "" {
				return cli.Usagef("units: --units and --geojson are required")
			}
			var at time.Time
			if o.at != "" {
				var err error
				if at, err = time.Parse(time.DateOnly, o.at); err != nil {
					return cli.Usagef("units: --at %q: want YYYY-MM-DD", o.at)
				}
			}
			st, err := cli.OpenStore(g)
			if err != nil {
				return err
			}
			defer st.Close()
			return runUnits(cmd.Context(), st, &o, at, cmd.OutOrStdout(), cmd.ErrOrStderr())
		},
	}
	cmd.Flags().StringVar(&o.units, "units", "", `units: "tiles:Z", a GeoJSON file, or "admin:LEVEL[,name=GLOB][,within=NAME]"`)
	cmd.Flags().StringVar(&o.unitID, "unit-id", "id", "property of a GeoJSON unit file holding each unit's id")
	cmd.Flags().StringVar(&o.unitName, "unit-name", "name", "property of a GeoJSON unit file holding each unit's name")
	cmd.Flags().StringVar(&o.at, "at", "", "date (YYYY-MM-DD) admin boundaries are taken at (default: latest)")
	cmd.Flags().StringVar(&o.geojson, "geojson", "", `output GeoJSON file ("-" for stdout)`)
	return cmd
}

// runUnits builds the units of o.units over st and writes them.
func runUnits(ctx context.Context, st *ingest.Store, o *unitsOptions, at time.Time, out, errOut io.Writer) error {
	stats, err := st.Stats(ctx)
	if err != nil {
		return err
	}
	uo := spatial.Options{IDProperty: o.unitID, NameProperty: o.unitName, Store: st, At: at}
	if stats.HasBBox {
		uo.Bound = stats.BBox
	}
	u, err := spatial.Build(ctx, o.units, uo)
	if err != nil {
		return err
	}
	for _, w := range u.Warnings() {
		fmt.Fprintln(errOut, "warning:", w)
	}
	fc := geojson.NewFeatureCollection()
	for i := range u.Len() {
		f := geojson.NewFeature(u.Geometry(i))
		f.Properties["id"] = u.ID(i)
		f.Properties["name"] = u.Name(i)
		f.Properties["area_m2"] = u.Area(i)
		fc.Append(f)
	}
	b, err := fc.MarshalJSON()
	if err != nil {
		return fmt.Errorf("units: encode GeoJSON: %w", err)
	}
	b = append(b, '\n')
	if o.geojson == "-" {
		_, err = out.Write(b)
		return err
	}
	if err := os.WriteFile(o.geojson, b, 0o644); err != nil {
		return fmt.Errorf("units: %w", err)
	}
	tw := tabwriter.NewWriter(out, 2, 4, 2, ' ', 0)
	fmt.Fprintf(tw, "%d units from %s written to %s\n", u.Len(), u.Source(), o.geojson)
	for i := range min(u.Len(), 20) {
		fmt.Fprintf(tw, "%s\t%s\t%.3f km²\n", u.ID(i), u.Name(i), u.Area(i)/1e6)
	}
	if u.Len() > 20 {
		fmt.Fprintf(tw, "... and %d more\n", u.Len()-20)
	}
	return tw.Flush()
}
