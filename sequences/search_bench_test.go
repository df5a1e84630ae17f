package sequences_test

import (
	"flag"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"slices"
	"testing"

	"padline/sequences"
	"padline/sequences/session"
)

var benchUnits = flag.Int("search.units", 3000, "synthetic units per spread in BenchmarkSearchTargets")

// searchFigures are one search's figures on one spread and SE target.
type searchFigures struct {
	meanSamples, p95Samples float64
	meanBracket             float64 // bracket probes per unit
	floor                   float64 // mean of the floor at each unit's trip (TripSearchFloorAt)
	rmsZ                    float64 // RMS of (error / reported SE)
	rmsErr                  float64
	capped, noisy           int
	units                   int
}

// tripPrediction is the demo variant's predicted trip distribution: the
// timing model's Monte Carlo mean and SD for QM-205 ('padline limits
// --variant QM-205'), what the session gives the search as its prior.
func tripPrediction(t testing.TB) (meanPF, sdPF float64) {
	v, err := session.LoadVariant("QM-205")
	if err != nil {
		t.Fatal(err)
	}
	rep, err := v.StationLimits(session.DefaultUncertaintyPF)
	if err != nil {
		t.Fatal(err)
	}
	return rep.Trip.MCMean, rep.Trip.MCSD
}

// searchRun runs n synthetic probit units (no calibration error: the
// search's own statistics) at spread sigma with a sample cap far above any
// need, so a stall shows in the sample counts. Each unit's true trip is
// drawn from N(pm, psd²) (the variant's predicted distribution); tripPrior
// gives the search that prediction as its prior. The units (trip points)
// and the latch's noise come from separate streams, so every search sees
// the same units.
func searchRun(t testing.TB, n int, seed uint64, sigma, se float64, c searchConfig, pm, psd float64) searchFigures {
	units := rand.New(rand.NewPCG(seed, 0x5eed))
	noise := rand.New(rand.NewPCG(seed, 0x401e))
	opt := sequences.SearchOptions{Refine: c.refine, SETargetPF: se, MaxRefineSamples: 2000, GuardPeekK: c.peek[0], GuardPeekUpK: c.peek[1]}
	if c.logSD > 0 {
		opt.SpreadPriorPF, opt.SpreadPriorLogSD = 2*1.2815515655446004*sigma, c.logSD
	}
	if c.tripPrior {
		opt.TripPriorPF, opt.TripPriorSDPF = pm, psd
	}
	levels := synthLevels()
	var samples []float64
	var z2, e2, bracket, floor float64
	f := searchFigures{units: n}
	for range n {
		mu := pm + psd*units.NormFloat64()
		p := &synthProber{rng: noise, pf: levels, mu: mu, sigma: sigma}
		res, err := sequences.FindTrip(p, levels, opt)
		if err != nil {
			t.Fatalf("FindTrip: %v", err)
		}
		fl, err := sequences.TripSearchFloorAt(levels, mu, sigma, se)
		if err != nil {
			t.Fatal(err)
		}
		floor += fl
		samples = append(samples, float64(res.Samples))
		bracket += float64(res.BracketProbes)
		e := res.TripPF - p.mu
		e2 += e * e
		z2 += (e / res.SEPF) * (e / res.SEPF)
		if res.RefineSamples >= opt.MaxRefineSamples {
			f.capped++
		}
		if res.Noisy {
			f.noisy++
		}
	}
	slices.Sort(samples)
	var sum float64
	for _, s := range samples {
		sum += s
	}
	f.meanSamples = sum / float64(n)
	f.meanBracket = bracket / float64(n)
	f.floor = floor / float64(n)
	f.p95Samples = samples[int(math.Ceil(0.95*float64(n)))-1]
	f.rmsZ = math.Sqrt(z2 / float64(n))
	f.rmsErr = math.Sqrt(e2 / float64(n))
	return f
}

// BenchmarkSearchTargets prints, for the posterior search beside the
// Laplace one it replaces, the figures of the search's targets on the demo
// station's ladder (256 levels 0.5 pF apart): samples per unit (every
// sample: bracket, refinement and guards) against the floor
// (TripSearchFloorAt: a bisection from no prior, then σ known), p95/mean,
// and RMS(error/SE) at spreads σ 0.15, 0.25, 0.35 pF and SE targets 0.1
// and 0.05 pF, with the units' trips drawn from the demo variant's
// predicted distribution; and the samples the trip prior saved (the same
// search, same units, bisecting from no prior). Run it once:
//
//	go test ./sequences -run '^$' -bench SearchTargets -benchtime 1x
func BenchmarkSearchTargets(b *testing.B) {
	for b.Loop() {
		writeSearchTargets(b, os.Stdout, *benchUnits)
	}
}

// searchConfig is one search the benchmark compares.
type searchConfig struct {
	name      string
	refine    sequences.Refinement
	logSD     float64 // prior on σ centred on the truth with this ln-SD; 0: the default prior
	peek      [2]int  // guard peek samples below and above (0: the default, 1 + 4)
	tripPrior bool
}

// searchConfigs are the searches the benchmark compares; the first is the
// station's (the session gives it both priors), the second the search
// before the trip prior, the third that search with the trip prior only.
var searchConfigs = []searchConfig{
	{"posterior, trip prior from the timing model, σ prior from recent units (ln-SD 0.25), guard peek 1+4 (the station's)", sequences.Posterior, 0.25, [2]int{}, true},
	{"posterior, same σ prior, guard peek 2+2, no trip prior: bisection of the whole ladder (before)", sequences.Posterior, 0.25, [2]int{2, 2}, false},
	{"posterior, trip prior, same σ prior, guard peek 2+2", sequences.Posterior, 0.25, [2]int{2, 2}, true},
	{"posterior, trip prior, same σ prior, guards only when suspect", sequences.Posterior, 0.25, [2]int{-1, -1}, true},
	{"posterior, trip prior, the variant's default σ prior (0.6 pF spread, ln-SD 0.7), guard peek 1+4", sequences.Posterior, 0, [2]int{}, true},
	{"laplace (the first search), no trip prior", sequences.Laplace, 0, [2]int{}, false},
}

func writeSearchTargets(t testing.TB, w io.Writer, n int) {
	pm, psd := tripPrediction(t)
	fmt.Fprintf(w, "trip search on 256 levels 0.5 pF apart, %d synthetic probit units per row, no calibration error;\n", n)
	fmt.Fprintf(w, "true trips drawn from QM-205's predicted distribution N(%.2f pF, %.2f pF) (timing model Monte Carlo, 'padline limits')\n", pm, psd)
	fmt.Fprintln(w, "floor: the issue's, per unit (bisection of the whole ladder from no prior, then σ known; TripSearchFloorAt)")
	type row struct{ se, sigma float64 }
	var rows []row
	for _, se := range []float64{0.1, 0.05} {
		for _, sigma := range []float64{0.15, 0.25, 0.35} {
			rows = append(rows, row{se, sigma})
		}
	}
	figs := make([][]searchFigures, len(searchConfigs))
	for ci, c := range searchConfigs {
		for i, r := range rows {
			figs[ci] = append(figs[ci], searchRun(t, n, uint64(100+i%3), r.sigma, r.se, c, pm, psd))
		}
	}
	for ci, c := range searchConfigs {
		fmt.Fprintf(w, "\n%s\n", c.name)
		fmt.Fprintf(w, "  %-5s %-5s %7s %8s %6s %7s %6s %6s %7s %6s\n", "SE", "σ", "floor", "samples", "÷floor", "bracket", "p95/m", "rmsZ", "RMS pF", "capped")
		for i, r := range rows {
			f := figs[ci][i]
			fmt.Fprintf(w, "  %-5.2f %-5.2f %7.1f %8.1f %6.2f %7.2f %6.2f %6.2f %7.3f %6d\n", r.se, r.sigma, f.floor, f.meanSamples,
				f.meanSamples/f.floor, f.meanBracket, f.p95Samples/f.meanSamples, f.rmsZ, f.rmsErr, f.capped)
		}
	}
	fmt.Fprintln(w, "\nsamples per unit, same units: the trip prior's saving (before − trip prior, both peek 2+2),")
	fmt.Fprintln(w, "and the station's search against before (peek 1+4 spends one sample more than 2+2):")
	for i, r := range rows {
		now, before, prior := figs[0][i], figs[1][i], figs[2][i]
		fmt.Fprintf(w, "  SE %.2f σ %.2f: prior saved %.2f (bracket probes %.2f → %.2f); station saves %.2f; ÷floor %.2f → %.2f\n", r.se, r.sigma,
			before.meanSamples-prior.meanSamples, before.meanBracket, prior.meanBracket,
			before.meanSamples-now.meanSamples, before.meanSamples/before.floor, now.meanSamples/now.floor)
	}
	fmt.Fprintln(w, "\ntargets: samples ≤ 1.25 × floor at SE 0.1 pF, ≤ 1.4 × at SE 0.05 pF; p95 ≤ 3 × mean; RMS(error/SE) 0.9–1.1")
}
