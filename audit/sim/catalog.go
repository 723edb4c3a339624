package sim

import (
	"math/rand/v2"
	"strconv"

	"github.com/paulmach/osm"
)

// Feature kinds the simulator keeps.
const (
	kindPOI uint8 = iota
	kindBuilding
	kindRoad
	nKinds
)

// Tag vocabulary. Values are ordinary OSM tag values (OSM wiki, Map features:
// common practice); names, streets and datasets are invented.
var (
	amenityValues  = [...]string{"cafe", "restaurant", "pharmacy", "school", "bench", "post_box", "library", "fuel"}
	shopValues     = [...]string{"bakery", "supermarket", "hairdresser", "convenience", "hardware", "clothes"}
	buildingValues = [...]string{"yes", "house", "detached", "residential", "garage", "shed", "commercial"}
	highwayValues  = [...]string{"residential", "tertiary", "service", "footway", "unclassified"}
	roofShapes     = [...]string{"flat", "gabled", "hipped", "pyramidal"}
	surfaces       = [...]string{"asphalt", "gravel", "paved", "unpaved", "compacted"}
	maxspeeds      = [...]string{"30", "40", "50", "60", "80"}
	wheelchairs    = [...]string{"yes", "no", "limited"}
	hours          = [...]string{"Mo-Fr 08:00-18:00", "Mo-Sa 09:00-17:00", "Mo-Su 07:00-22:00", "Tu-Sa 10:00-16:00", "24/7"}
	sources        = [...]string{"survey", "local knowledge", "gps trace", "aerial imagery", "estimate"}
	notes          = [...]string{"check entrance position", "verify on next visit", "name from signboard", "outline approximate"}
	comments       = [...]string{"added details from a walk", "fixed road alignment", "updated opening hours",
		"mapped new houses", "removed demolished building", "small corrections", "added shop names",
		"tidied building outlines", "added house numbers", "survey of the harbour quarter"}
	editors = [...]string{"Fernquill 3.1", "Fernquill 3.2", "Slatepad 1.8", "Tidemark 0.9"}
)

// optionalKeys lists the attribute keys a feature of a kind may carry besides its class key.
var optionalKeys = [nKinds][]string{
	kindPOI:      {"name", "opening_hours", "phone", "website", "wheelchair"},
	kindBuilding: {"building:levels", "addr:housenumber", "addr:street", "roof:shape"},
	kindRoad:     {"name", "surface", "maxspeed", "lanes"},
}

// provenanceKeys are bookkeeping keys: an edit touching only these is not attribute work.
var provenanceKeys = [...]string{"source", "note"}

// keyCode reports whether key is one the simulator writes as an optional attribute.
func keyCode(key string) (int, bool) {
	for k := range optionalKeys {
		for i, s := range optionalKeys[k] {
			if s == key {
				return k*16 + i, true
			}
		}
	}
	return 0, false
}

// rateClass is the family a feature's key rates are looked up under.
func rateClass(kind uint8, class osm.Tag) string {
	switch kind {
	case kindBuilding:
		return "building=*"
	case kindRoad:
		return "highway=*"
	}
	return class.Key + "=*"
}

// defaultKeyRate is the presence rate of an optional key without a configured KeyRate.
const defaultKeyRate = 0.4

// keyValue draws a value for an optional key; streets come from the district.
func keyValue(r *rand.Rand, key string, d *district) string {
	switch key {
	case "name":
		return d.placeName(r)
	case "opening_hours":
		return hours[r.IntN(len(hours))]
	case "phone":
		return "+99 " + strconv.Itoa(200+r.IntN(700)) + " " + strconv.Itoa(1000+r.IntN(9000))
	case "website":
		return "https://example.org/" + strconv.Itoa(r.IntN(100000))
	case "wheelchair":
		return wheelchairs[r.IntN(len(wheelchairs))]
	case "building:levels":
		return strconv.Itoa(1 + r.IntN(5))
	case "addr:housenumber":
		return strconv.Itoa(1 + r.IntN(180))
	case "addr:street":
		return d.streets[r.IntN(len(d.streets))]
	case "roof:shape":
		return roofShapes[r.IntN(len(roofShapes))]
	case "surface":
		return surfaces[r.IntN(len(surfaces))]
	case "maxspeed":
		return maxspeeds[r.IntN(len(maxspeeds))]
	case "lanes":
		return strconv.Itoa(1 + r.IntN(4))
	case "source":
		return sources[r.IntN(len(sources))]
	case "note":
		return notes[r.IntN(len(notes))]
	}
	return "yes"
}

// classTag draws the class tag of a new feature of kind.
func classTag(r *rand.Rand, kind uint8) osm.Tag {
	switch kind {
	case kindBuilding:
		return osm.Tag{Key: "building", Value: buildingValues[r.IntN(len(buildingValues))]}
	case kindRoad:
		return osm.Tag{Key: "highway", Value: highwayValues[r.IntN(len(highwayValues))]}
	}
	if r.IntN(2) == 0 {
		return osm.Tag{Key: "amenity", Value: amenityValues[r.IntN(len(amenityValues))]}
	}
	return osm.Tag{Key: "shop", Value: shopValues[r.IntN(len(shopValues))]}
}

// Syllables for invented names.
var (
	syllA = [...]string{"Quor", "Vesk", "Tharn", "Ilm", "Brae", "Osk", "Kel", "Marv", "Dru", "Yss", "Fen", "Gal", "Hroth", "Lun", "Pell", "Zar"}
	syllB = [...]string{"a", "e", "i", "o", "u", "ae", "y", "ou"}
	syllC = [...]string{"vin", "dor", "mere", "lisk", "hallow", "wyn", "stead", "brook", "moor", "gate", "thorp", "vale"}
	roads = [...]string{"Road", "Lane", "Way", "Street", "Row", "Walk"}
	handA = [...]string{"kav", "lum", "tor", "ris", "nal", "bex", "quin", "dov", "sel", "marr", "jun", "wex"}
	handB = [...]string{"ena", "ovo", "ith", "ark", "ulo", "emy", "ast", "ira"}
)

func inventName(r *rand.Rand) string {
	return syllA[r.IntN(len(syllA))] + syllB[r.IntN(len(syllB))] + syllC[r.IntN(len(syllC))]
}

func inventHandle(r *rand.Rand, uid int) string {
	return handA[r.IntN(len(handA))] + handB[r.IntN(len(handB))] + "_" + strconv.Itoa(uid)
}
