package sim_test

import (
	"context"
	"fmt"
	"log"
	"os"

	"github.com/loadwake/loadwake/audit/sim"
)

// A small world with two import cohorts and a null effect: a check that an
// estimator finds nothing where nothing was planted.
func ExampleGenerate() {
	dir, err := os.MkdirTemp("", "sim-example-")
	if err != nil {
		log.Fatal(err)
	}
	defer os.RemoveAll(dir)

	cfg := sim.DefaultConfig()
	cfg.Cols, cfg.Rows, cfg.Months = 4, 4, 12
	cfg.Treated, cfg.Waves = 4, 2
	cfg.Effects = sim.Effects{Geometry: 1, Attribute: 1, NewFeature: 1, Deletion: 1}
	tr, err := sim.Generate(context.Background(), cfg, dir, false)
	if err != nil {
		log.Fatal(err)
	}
	fmt.Println(tr.Region.Name, len(tr.Districts), "districts,", tr.Months[0], "to", tr.Months[len(tr.Months)-1])
	for _, c := range tr.Cohorts {
		fmt.Printf("cohort %d starts %s with %d districts\n", c.Wave, c.Start, len(c.Districts))
	}
	fmt.Println("organic events counted:", tr.Tallies.Organic.Total() > 0)
	// Output:
	// Quorvesk Isle 16 districts, 2019-01 to 2019-12
	// cohort 1 starts 2019-04 with 2 districts
	// cohort 2 starts 2019-10 with 2 districts
	// organic events counted: true
}
