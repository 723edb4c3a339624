package sim

import (
	"encoding/json"
	"fmt"
	"math/rand/v2"

	"github.com/paulmach/orb"
	"github.com/paulmach/orb/geojson"
)

// ProposalSource is the invented agency behind the demo's follow-up proposal.
const ProposalSource = "Quorvesk Survey Registry (invented)"

// Proposal invents a follow-up import proposal as GeoJSON (RFC 7946): in each
// of the given areas (district bounds the import did not reach), 45 features
// of an invented survey office: small square buildings, three in ten with an
// address, and every ninth feature an amenity point with a name. The same
// seed gives the same bytes. The data are invented: never upload them.
func Proposal(areas []orb.Bound, seed uint64) ([]byte, error) {
	rng := rand.New(rand.NewPCG(seed, 0x70726f706f73616c))
	fc := geojson.NewFeatureCollection()
	n := 0
	for _, b := range areas {
		w, h := b.Max[0]-b.Min[0], b.Max[1]-b.Min[1]
		for k := range 45 {
			x := b.Min[0] + w*(0.1+0.8*rng.Float64())
			y := b.Min[1] + h*(0.1+0.8*rng.Float64())
			n++
			if k%9 == 0 {
				f := geojson.NewFeature(orb.Point{x, y})
				f.ID = fmt.Sprintf("qsr-%d", n)
				f.Properties["amenity"] = []string{"cafe", "library", "pharmacy"}[rng.IntN(3)]
				f.Properties["name"] = fmt.Sprintf("Quorvesk Place %d", n)
				f.Properties["source"] = ProposalSource
				fc.Append(f)
				continue
			}
			d := 0.00008
			ring := orb.Ring{{x, y}, {x + d, y}, {x + d, y + d}, {x, y + d}, {x, y}}
			f := geojson.NewFeature(orb.Polygon{ring})
			f.ID = fmt.Sprintf("qsr-%d", n)
			f.Properties["building"] = "yes"
			f.Properties["source"] = ProposalSource
			if rng.Float64() < 0.3 {
				f.Properties["addr:housenumber"] = fmt.Sprint(1 + rng.IntN(120))
				f.Properties["addr:street"] = "Harbour Lane"
			}
			fc.Append(f)
		}
	}
	data, err := json.MarshalIndent(fc, "", " ")
	if err != nil {
		return nil, fmt.Errorf("sim: proposal: %w", err)
	}
	return append(data, '\n'), nil
}
