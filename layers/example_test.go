package layers_test

import (
	"fmt"
	"time"

	"github.com/loadwake/loadwake/layers"
	"github.com/loadwake/loadwake/rules"
	"github.com/paulmach/osm"
)

// Node 2389008483 of the osm module's testdata (annotate/testdata/
// way_230391153.osm): version 4 of 2016-07-26 adds highway=crossing to a
// vertex that had no tags, so it becomes a feature at version 4.
func ExampleClassify() {
	t3, _ := time.Parse(time.RFC3339, "2013-10-30T19:43:52Z")
	t4, _ := time.Parse(time.RFC3339, "2016-07-26T15:28:31Z")
	prev := &osm.Node{ID: 2389008483, Version: 3, Visible: true, Lat: 37.8052155, Lon: -122.2705774,
		ChangesetID: 18623274, Timestamp: t3}
	cur := &osm.Node{ID: 2389008483, Version: 4, Visible: true, Lat: 37.8052155, Lon: -122.2705774,
		ChangesetID: 41040656, Timestamp: t4, Tags: osm.Tags{{Key: "highway", Value: "crossing"}}}
	for _, e := range layers.Classify(prev, cur, rules.Default(), nil) {
		fmt.Println(e.Object, e.Layer, e.Class, e.Keys[0].Key, e.Keys[0].Change, e.Location)
	}
	// Output:
	// node/2389008483:4 new_feature highway=crossing highway added [-122.2705774 37.8052155]
}
