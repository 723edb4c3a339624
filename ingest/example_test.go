package ingest_test

import (
	"context"
	"fmt"
	"path/filepath"

	"github.com/loadwake/loadwake/ingest"
)

// Ingest a full history file (way 6394949 with its nodes, from the osm
// module's annotate testdata) into an in-memory store and print its totals.
func ExampleIngest() {
	ctx := context.Background()
	s, err := ingest.OpenInMemory(ingest.DefaultOptions())
	if err != nil {
		fmt.Println(err)
		return
	}
	defer s.Close()
	rep, err := ingest.Ingest(ctx, s, []string{filepath.Join("testdata", "way_6394949.osm")}, ingest.IngestOptions{})
	if err != nil {
		fmt.Println(err)
		return
	}
	st := rep.Totals
	fmt.Printf("%d nodes in %d versions, %d way in %d versions\n", st.Nodes, st.NodeVersions, st.Ways, st.WayVersions)
	fmt.Println("first edit", st.FirstEdit.Format("2006-01-02"), "last edit", st.LastEdit.Format("2006-01-02"))
	// Output:
	// 10 nodes in 33 versions, 1 way in 5 versions
	// first edit 2007-09-17 last edit 2016-07-25
}
