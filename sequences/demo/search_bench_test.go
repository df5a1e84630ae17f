package demo

import (
	"context"
	"flag"
	"fmt"
	"io"
	"maps"
	"math"
	"os"
	"slices"
	"testing"

	"padline/sequences/session"
)

var benchFixtureUnits = flag.Int("search.fixture-units", 300, "units per simulated fixture in BenchmarkSearchTargets")

// BenchmarkSearchTargets prints the demo station's figures for the trip
// search, the posterior search with the folded checks beside the earlier
// plan (laplace): whole-unit fixture time, search samples against the
// computed floor, false fails on good units, and the trip error on good
// units pooled over 10 simulated fixtures (seeds 1–10, each its own stray
// and rung calibration errors) and within each fixture (about its bias).
// With the sequences benchmark of the same name it is the search's one
// benchmark command:
//
//	go test -run '^$' -bench SearchTargets -benchtime 1x ./sequences ./sequences/demo
func BenchmarkSearchTargets(b *testing.B) {
	for b.Loop() {
		writeStationTargets(b, os.Stdout, *benchFixtureUnits)
	}
}

// stationFigures are one plan's figures over the fixtures.
type stationFigures struct {
	units, good, falseFails   int
	fixtureMS, samples, floor float64
	sq, sqAboutBias, z2       float64
	zs                        []float64 // reported SEs, in error order
	errs                      int
	defectCodes               map[string]map[string]int
}

func writeStationTargets(t testing.TB, w io.Writer, perFixture int) {
	ctx := context.Background()
	v, err := session.LoadVariant("QM-205")
	if err != nil {
		t.Fatal(err)
	}
	const fixtures = 10
	// The posterior search with the shift-start check's fixture offset,
	// the same without it, and the earlier plan (laplace, no offset).
	strategies := []string{"bracket", "bracket", session.SearchLaplace}
	noOffset := []bool{false, true, true}
	figs := make([]stationFigures, len(strategies))
	for i := range figs {
		figs[i].defectCodes = map[string]map[string]int{}
	}
	for seed := uint64(1); seed <= fixtures; seed++ {
		st, err := session.LoadStation("demo-sim")
		if err != nil {
			t.Fatal(err)
		}
		st.Sim.Seed = seed
		u, _ := session.StatedUncertainty(st)
		rep, err := v.StationLimits(u)
		if err != nil {
			t.Fatal(err)
		}
		res := &Result{Variant: v, Station: st, Limits: rep}
		for i, strategy := range strategies {
			var us []Unit
			err := shift(ctx, res, "bench", strategy, discard{}, noProgress{}, Options{Units: perFixture, Seed: seed, NoOffset: noOffset[i]}, func(_ int, u Unit) error {
				us = append(us, u)
				return nil
			})
			if err != nil {
				t.Fatal(err)
			}
			f := &figs[i]
			var es []float64
			for _, u := range us {
				f.units++
				f.fixtureMS += u.FixtureMS
				for _, d := range u.Defects {
					if f.defectCodes[d] == nil {
						f.defectCodes[d] = map[string]int{}
					}
					oc := u.FailCode
					if oc == "" {
						oc = "pass"
					}
					f.defectCodes[d][oc]++
				}
				if len(u.Defects) > 0 {
					continue
				}
				f.good++
				if u.Verdict != "pass" {
					f.falseFails++
				}
				if u.floorSamples > 0 {
					f.samples += float64(u.samples)
					f.floor += u.floorSamples
				}
				if u.TripPF != nil && u.TrueTripPF != nil {
					e := *u.TripPF - *u.TrueTripPF
					es = append(es, e)
					f.sq += e * e
					f.zs = append(f.zs, *u.TripSEPF)
				}
			}
			var mean float64
			for _, e := range es {
				mean += e
			}
			mean /= float64(len(es))
			ses := f.zs[len(f.zs)-len(es):]
			for j, e := range es {
				f.sqAboutBias += (e - mean) * (e - mean)
				f.z2 += (e - mean) * (e - mean) / (ses[j] * ses[j])
			}
			f.errs += len(es)
		}
	}
	fmt.Fprintf(w, "demo station (QM-205 on demo-sim), %d simulated fixtures × %d units, good units only for the errors\n", fixtures, perFixture)
	fmt.Fprintf(w, "%-44s %12s %12s %12s\n", "", "posterior", "no offset", "laplace")
	row := func(name string, g func(f stationFigures) float64) {
		fmt.Fprintf(w, "%-44s", name)
		for _, f := range figs {
			fmt.Fprintf(w, " %12.3f", g(f))
		}
		fmt.Fprintln(w)
	}
	row("whole unit, fixture ms (mean, all units)", func(f stationFigures) float64 { return f.fixtureMS / float64(f.units) })
	row("search samples per good unit", func(f stationFigures) float64 { return f.samples / float64(f.good) })
	row("  ÷ floor (σ known, SE 0.1 pF)", func(f stationFigures) float64 { return f.samples / f.floor })
	row("false fails on good units", func(f stationFigures) float64 { return float64(f.falseFails) })
	row("trip RMS error pooled over fixtures, pF", func(f stationFigures) float64 { return math.Sqrt(f.sq / float64(f.errs)) })
	row("trip RMS error within a fixture, pF", func(f stationFigures) float64 { return math.Sqrt(f.sqAboutBias / float64(f.errs)) })
	// About the fixture's bias, the error still holds the rungs' own
	// calibration errors (σ 0.05 pF each), which the SE does not carry.
	row("RMS(error about the bias / SE)", func(f stationFigures) float64 { return math.Sqrt(f.z2 / float64(f.errs)) })
	fmt.Fprintln(w, "defect → fail codes (posterior | laplace):")
	for _, d := range slices.Sorted(maps.Keys(figs[0].defectCodes)) {
		fmt.Fprintf(w, "  %-17s %v | %v\n", d, figs[0].defectCodes[d], figs[2].defectCodes[d])
	}
	fmt.Fprintln(w, "targets: whole unit ≤ 120 ms; pooled trip RMS ≤ 0.12 pF")
}
