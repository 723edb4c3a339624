package planrun

import (
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"github.com/paulmach/orb/geojson"

	"github.com/loadwake/loadwake/audit/rollout"
	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
)

// World makes cfg's import follow the plan at path, written by loadwake
// plan over the districts.geojson of a world of the same grid: each plan
// unit (a district id) is loaded in its wave's month. Without monthsSet the
// world runs to the plan's evaluation month; units whose wave starts after
// the world's last month (the held-back wave, typically) are not loaded,
// and a line on out says so.
func World(out io.Writer, path string, cfg sim.Config, monthsSet bool) (sim.Config, error) {
	pl, err := rollout.ReadPlan(path)
	if err != nil {
		return cfg, err
	}
	if !monthsSet {
		eval, err := cfg.MonthIndex(pl.Evaluation)
		if err != nil || eval < 1 {
			return cfg, cli.Usagef("--plan %s: its evaluation month %s is not after the world's first month %s (set --start)",
				path, pl.Evaluation, cfg.Start.Format("2006-01"))
		}
		cfg.Months = eval + 1
	}
	a := map[int]string{}
	late := map[int]int{} // wave → units starting after the world ends
	for _, u := range pl.Units {
		id, err := strconv.Atoi(u.ID)
		if err != nil {
			return cfg, cli.Usagef("--plan %s: unit %q is not a district id: plan over the world's districts (loadwake plan --units WORLD/%s)",
				path, u.ID, sim.DistrictsFile)
		}
		if i, err := cfg.MonthIndex(u.Start); err == nil && i >= cfg.Months {
			late[u.Wave]++
			continue
		}
		a[id] = u.Start
	}
	for w := 1; w <= pl.Waves; w++ {
		if late[w] > 0 {
			fmt.Fprintf(out, "plan %s: wave %d (%d units) starts after the world's last month: not loaded\n", path, w, late[w])
		}
	}
	if len(a) == 0 {
		return cfg, cli.Usagef("--plan %s: no wave starts within the world's months", path)
	}
	if err := checkPlanPlaces(out, path, cfg); err != nil {
		return cfg, err
	}
	cfg = cfg.WithAssignment(a)
	if err := cfg.Validate(); err != nil {
		return cfg, cli.Usagef("--plan %s: %s (plan over this world's districts with the same --cols, --rows and --start)",
			path, strings.TrimPrefix(err.Error(), "sim: invalid configuration: "))
	}
	return cfg, nil
}

// checkPlanPlaces compares the unit shapes of the plan.geojson beside the
// plan with the districts of cfg, so that a plan over another grid is not
// loaded into the wrong places; without the file it says so on out.
func checkPlanPlaces(out io.Writer, path string, cfg sim.Config) error {
	gj := filepath.Join(filepath.Dir(path), "plan.geojson")
	data, err := os.ReadFile(gj)
	if errors.Is(err, fs.ErrNotExist) {
		fmt.Fprintf(out, "plan %s: no plan.geojson beside it: the districts' places are not checked\n", path)
		return nil
	}
	if err != nil {
		return fmt.Errorf("simulate: read %s: %w", gj, err)
	}
	fc, err := geojson.UnmarshalFeatureCollection(data)
	if err != nil {
		return cli.Usagef("%s: %v", gj, err)
	}
	for i, f := range fc.Features {
		id, err := strconv.Atoi(fmt.Sprint(f.Properties["id"]))
		if err != nil || f.Geometry == nil || id < 1 || id > cfg.Districts() {
			return cli.Usagef("%s: feature %d (id %v) is not a district of this %d×%d world", gj, i+1, f.Properties["id"], cfg.Cols, cfg.Rows)
		}
		got, want := f.Geometry.Bound(), cfg.DistrictBound(id)
		if math.Abs(got.Min[0]-want.Min[0]) > 1e-6 || math.Abs(got.Min[1]-want.Min[1]) > 1e-6 ||
			math.Abs(got.Max[0]-want.Max[0]) > 1e-6 || math.Abs(got.Max[1]-want.Max[1]) > 1e-6 {
			return cli.Usagef("%s: unit %d lies elsewhere than district %d of this world: plan over the districts of a world with the same --cols and --rows", gj, id, id)
		}
	}
	return nil
}
