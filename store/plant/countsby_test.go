package plant_test

import (
	"context"
	"strconv"
	"testing"
	"time"

	"padline/sequences"
	"padline/store"
	"padline/store/plant"
)

// CountsBy gives every group the very counts Counts gives it with the
// group's filter, in one query: three stations on two lines, by station,
// line, fixture, lot and site, over all runs and over passes since a time.
func TestCountsByMatchesCounts(t *testing.T) {
	ctx := context.Background()
	url, _ := newSchema(t, baseURL())
	p := openPlant(t, url)
	start := time.Date(2026, 11, 20, 6, 0, 0, 0, time.UTC)
	for i, st := range []plant.Station{{Name: "S1", Line: "L1"}, {Name: "S2", Line: "L1"}, {Name: "S3", Line: "L2"}} {
		register(t, p, st)
		log := stationLog(t, tempLog(t, st.Name), st.Name, 300+100*i, start, uint64(i+1))
		if err := (&plant.Forwarder{Log: log, Plant: p, Station: st.Name}).Drain(ctx); err != nil {
			t.Fatal(err)
		}
	}
	for _, f := range []store.Filter{{Variant: "QM-205"}, {Variant: "QM-205", Verdict: sequences.Pass, Since: start.Add(10 * time.Minute)}} {
		for _, by := range []string{"station", "line", "fixture", "lot", "site"} {
			got, err := p.CountsBy(ctx, f, by)
			if err != nil {
				t.Fatal(err)
			}
			if len(got) == 0 || (by == "station" && len(got) != 3) || (by == "line" && len(got) != 2) {
				t.Fatalf("by %s: %d groups", by, len(got))
			}
			for k, c := range got {
				g := f
				switch by {
				case "station":
					g.Station = k
				case "line":
					g.Line = k
				case "fixture":
					g.Fixture = k
				case "lot":
					g.Lot = k
				case "site":
					if g.Site, _ = strconv.Atoi(k); k == "" {
						g.Site = -1
					}
				}
				want, err := p.Counts(ctx, g)
				if err != nil {
					t.Fatal(err)
				}
				if c != want || c.Runs == 0 {
					t.Errorf("by %s %q (filter %+v): CountsBy %+v, Counts %+v", by, k, f, c, want)
				}
			}
		}
	}
}
