package session

import "strings"

// StationPlant is the station file's optional `plant:` section: the plant
// store this station forwards its runs to.
type StationPlant struct {
	// URL is the plant store, postgres://ROLE@HOST/DB; "" forwards nothing.
	URL string
}

func readStationPlant(d *doc) StationPlant {
	var p StationPlant
	if !d.section("plant", false) {
		return p
	}
	p.URL = d.str("plant.url", true)
	if p.URL != "" && !strings.HasPrefix(p.URL, "postgres://") && !strings.HasPrefix(p.URL, "postgresql://") {
		d.fail("plant.url", "want a postgres:// URL, got %q", p.URL)
	}
	return p
}
