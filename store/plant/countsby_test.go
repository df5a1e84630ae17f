package plant_test

import (
	"context"
	"math"
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
			if by != "site" {
				runPointsMatch(ctx, t, p, f, by, got)
			}
		}
	}
}

// runPointsMatch checks drift's one-pass read against the plant's other
// queries: FirstCountsBy gives CountsBy's first-pass counts and nothing
// else, RunPoints' verdicts tally to CountsBy's run totals per group, and
// its runs with a trip point that pass are Trips' passing series, in order.
func runPointsMatch(ctx context.Context, t *testing.T, p *plant.DB, f store.Filter, by string, counts map[string]store.Counts) {
	t.Helper()
	first, err := p.FirstCountsBy(ctx, f, by)
	if err != nil {
		t.Fatal(err)
	}
	tally := map[string]store.Counts{}
	var got []store.TripPoint
	key := func(q store.TripPoint) string {
		return map[string]string{"station": q.Station, "line": q.Line, "fixture": q.Fixture, "lot": q.Lot}[by]
	}
	for q, err := range p.RunPoints(ctx, f, by) {
		if err != nil {
			t.Fatal(err)
		}
		c := tally[key(q)]
		c.Runs++
		switch q.Verdict {
		case sequences.Pass:
			c.Pass++
		case sequences.Fail:
			c.Fail++
		case sequences.StationFault:
			c.StationFault++
		}
		tally[key(q)] = c
		if q.Verdict == sequences.Pass && !math.IsNaN(q.TripPF) {
			got = append(got, q)
		}
	}
	for k, c := range counts {
		if w := (store.Counts{FirstUnits: c.FirstUnits, FirstPass: c.FirstPass}); first[k] != w {
			t.Errorf("by %s %q (filter %+v): FirstCountsBy %+v, CountsBy's first-pass %+v", by, k, f, first[k], w)
		}
		c.FirstUnits, c.FirstPass = 0, 0
		if tally[k] != c {
			t.Errorf("by %s %q (filter %+v): RunPoints' verdicts %+v, CountsBy %+v", by, k, f, tally[k], c)
		}
	}
	if len(first) != len(counts) || len(tally) != len(counts) {
		t.Errorf("by %s (filter %+v): %d groups in FirstCountsBy, %d in RunPoints, %d in CountsBy", by, f, len(first), len(tally), len(counts))
	}
	pf := f
	pf.Verdict = sequences.Pass
	var want []store.TripPoint
	for q, err := range p.Trips(ctx, pf, true) {
		if err != nil {
			t.Fatal(err)
		}
		want = append(want, q)
	}
	if len(got) != len(want) || len(want) == 0 {
		t.Fatalf("by %s (filter %+v): %d passing points with a trip from RunPoints, %d from Trips", by, f, len(got), len(want))
	}
	for i := range want {
		w, g := want[i], got[i]
		if g.RunID != w.RunID || !g.Finished.Equal(w.Finished) || g.TripPF != w.TripPF || key(g) != key(w) {
			t.Fatalf("by %s point %d: RunPoints %+v, Trips %+v", by, i, g, w)
		}
	}
}
