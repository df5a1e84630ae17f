package sequences_test

import (
	"context"
	"math"
	"syscall"
	"testing"
	"time"

	"padline/fixture"
	"padline/fixture/sim"
	"padline/sequences"
)

// singleFigures tests units one at a time on the demo fixture (site 1 of
// the demo panel alone: its rungs, stray and calibration) with the same
// plan and returns the mean fixture time per unit and the trip RMS error
// against the simulator's truth over good units.
func singleFigures(b *testing.B, serials []string) (fixtureMS, rmsPF, lessBiasPF float64) {
	b.Helper()
	fm := sim.DefaultPanelModel(1).Sites[0]
	line, err := sim.NewLine(fm, qm205Units(), 1)
	if err != nil {
		b.Fatal(err)
	}
	lad, err := fixture.NewLadder(fm.RungsPF, fm.StrayPF)
	if err != nil {
		b.Fatal(err)
	}
	fx, err := fixture.New(line.Pins(), lad, fixture.Config{Operate: fm.Operate, Bounce: fm.Bounce, LatchDelay: testLatchDelay}, line.Clock())
	if err != nil {
		b.Fatal(err)
	}
	plan, err := sequences.NewPlan(qm205Plan(), lad.Distinct())
	if err != nil {
		b.Fatal(err)
	}
	var total time.Duration
	var errs []float64
	for _, serial := range serials {
		u := line.Load(serial)
		run := &sequences.Run{Serial: serial}
		tr, err := plan.Execute(context.Background(), fx, line.Clock(), run)
		line.Unload()
		if err != nil {
			b.Fatal(err)
		}
		total += run.Finished.Sub(run.Started)
		if truth := u.Truth(); truth.Trip == sim.TripsAt && tr.Trip != nil && tr.Trip.Found && !tr.Trip.Below {
			errs = append(errs, tr.Trip.TripPF-truth.TripPF)
		}
	}
	rms, less := rmsFigures([][]float64{errs})
	return ms(total) / float64(len(serials)), rms, less
}

// rmsFigures returns the RMS of every error and the RMS about each
// group's mean (a fixture site's calibration bias, the same for every unit
// tested there, which only a reference unit shows).
func rmsFigures(groups [][]float64) (rms, lessBias float64) {
	var sq, sqb float64
	var n int
	for _, g := range groups {
		var mean float64
		for _, e := range g {
			mean += e / float64(len(g))
		}
		for _, e := range g {
			sq += e * e
			sqb += (e - mean) * (e - mean)
			n++
		}
	}
	return math.Sqrt(sq / float64(n)), math.Sqrt(sqb / float64(n))
}

func ms(d time.Duration) float64 { return float64(d) / float64(time.Millisecond) }

// BenchmarkPanel tests panels of the QM-205 demo units on the simulated
// panel fixture (realism floor noise, calibration errors, 0.5 pF adjacent
// pad coupling) and reports, beside the same units tested one at a time:
//
//   - fixture-ms/panel and x-single: the panel's fixture time and its
//     ratio to one single unit's (targets: 8 sites ≤ 2.5×, 16 sites ≤ 5×);
//
//   - rms-pF and rms-single-pF: the per-site trip RMS error against the
//     simulator's truth at that site (the unit's own trip point less its
//     neighbours' coupling) and the single-site search's against the
//     unit's own (target: within 10 %), and both about each fixture
//     site's own calibration bias (rms-less-bias…), which isolates the
//     search;
//
//   - cpu-ms/site: the process's CPU time (user + system) per site, which
//     a loaded machine does not inflate as it does ns/op (target ≤ 1 ms).
//
//     go test ./sequences -run '^$' -bench Panel -benchtime 50x
func BenchmarkPanel(b *testing.B) {
	for _, c := range []struct {
		name   string
		sites  int
		ganged bool
	}{
		{"ganged-8", 8, true},
		{"ganged-16", 16, true},
		{"own-8", 8, false},
	} {
		b.Run(c.name, func(b *testing.B) {
			pm := sim.DefaultPanelModel(c.sites)
			pm.Ganged = c.ganged
			p := newSimPanel(b, pm, qm205Units(), 1)
			var all []string
			for i := range b.N {
				all = append(all, panelSerials(i+1, c.sites)...)
			}
			var total, cpu time.Duration
			errs := make([][]float64, c.sites)
			var good int
			b.ResetTimer()
			for i := range b.N {
				serials := all[i*c.sites : (i+1)*c.sites]
				c0 := cpuTime()
				runs, tr, err := p.test(b, context.Background(), serials, allSites(c.sites))
				cpu += cpuTime() - c0
				if err != nil {
					b.Fatal(err)
				}
				b.StopTimer()
				total += runs[0].Finished.Sub(runs[0].Started)
				if _, err := p.sim.Load(serials); err != nil {
					b.Fatal(err)
				}
				for s, r := range runs {
					if r.Verdict == sequences.Pass {
						good++
					}
					if want := p.sim.TripInPanelPF(s); !math.IsNaN(want) && tr.Trips[s] != nil && tr.Trips[s].Found && !tr.Trips[s].Below {
						errs[s] = append(errs[s], tr.Trips[s].TripPF-want)
					}
				}
				p.sim.Unload()
				b.StartTimer()
			}
			b.StopTimer()
			single, singleRMS, singleLess := singleFigures(b, all)
			rms, less := rmsFigures(errs)
			per := ms(total) / float64(b.N)
			b.ReportMetric(per, "fixture-ms/panel")
			b.ReportMetric(single, "fixture-ms/single")
			b.ReportMetric(per/single, "x-single")
			b.ReportMetric(rms, "rms-pF")
			b.ReportMetric(singleRMS, "rms-single-pF")
			b.ReportMetric(less, "rms-less-bias-pF")
			b.ReportMetric(singleLess, "rms-less-bias-single-pF")
			b.ReportMetric(float64(good)/float64(b.N*c.sites), "pass-frac")
			b.ReportMetric(ms(cpu)/float64(b.N*c.sites), "cpu-ms/site")
		})
	}
}

// cpuTime is the process's user + system CPU time so far.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
