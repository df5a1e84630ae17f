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
)

var benchUnits = flag.Int("search.units", 3000, "synthetic units per spread in BenchmarkSearchTargets")

// searchFigures are one search's figures on one spread and SE target.
type searchFigures struct {
	meanSamples, p95Samples float64
	rmsZ                    float64 // RMS of (error / reported SE)
	rmsErr                  float64
	capped, noisy           int
	units                   int
}

// searchRun runs n synthetic probit units (no calibration error: the
// search's own statistics) at spread sigma with a sample cap far above any
// need, so a stall shows in the sample counts.
func searchRun(t testing.TB, n int, seed uint64, sigma, se float64, refine sequences.Refinement, logSD float64, peek int) searchFigures {
	rng := rand.New(rand.NewPCG(seed, 0x5eed))
	opt := sequences.SearchOptions{Refine: refine, SETargetPF: se, MaxRefineSamples: 2000, GuardPeekK: peek}
	if logSD > 0 {
		opt.SpreadPriorPF, opt.SpreadPriorLogSD = 2*1.2815515655446004*sigma, logSD
	}
	var samples []float64
	var z2, e2 float64
	f := searchFigures{units: n}
	for range n {
		lad := newSynthLadder(rng, 0)
		lo, hi := lad.True[0]+0.5, lad.True[len(lad.True)-1]-0.5
		p := &synthProber{rng: rng, pf: lad.True, mu: lo + (hi-lo)*rng.Float64(), sigma: sigma}
		res, err := sequences.FindTrip(p, lad.Entered, opt)
		if err != nil {
			t.Fatalf("FindTrip: %v", err)
		}
		samples = append(samples, float64(res.Samples))
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
	f.p95Samples = samples[int(math.Ceil(0.95*float64(n)))-1]
	f.rmsZ = math.Sqrt(z2 / float64(n))
	f.rmsErr = math.Sqrt(e2 / float64(n))
	return f
}

// BenchmarkSearchTargets prints, for the posterior search beside the
// Laplace one it replaces, the figures of the search's targets on the demo
// station's ladder (256 levels 0.5 pF apart): samples per unit (every
// sample: bracket, refinement and guards) against the floor
// (TripSearchFloor), p95/mean, and RMS(error/SE) at spreads σ 0.15, 0.25,
// 0.35 pF and SE targets 0.1 and 0.05 pF. Run it once:
//
//	go test ./sequences -run '^$' -bench SearchTargets -benchtime 1x
func BenchmarkSearchTargets(b *testing.B) {
	for b.Loop() {
		writeSearchTargets(b, os.Stdout, *benchUnits)
	}
}

// searchConfigs are the searches the benchmark compares.
var searchConfigs = []struct {
	name   string
	refine sequences.Refinement
	logSD  float64 // prior on σ centred on the truth with this ln-SD; 0: the default prior
	peek   int
}{
	{"posterior, σ prior from recent units (ln-SD 0.25), guard peek 2+2", sequences.Posterior, 0.25, 0},
	{"posterior, same prior, guards only when suspect", sequences.Posterior, 0.25, -1},
	{"posterior, the variant's default prior (0.6 pF spread, ln-SD 0.7)", sequences.Posterior, 0, 0},
	{"laplace (today's search)", sequences.Laplace, 0, 0},
}

func writeSearchTargets(t testing.TB, w io.Writer, n int) {
	levels := synthLevels()
	fmt.Fprintf(w, "trip search on 256 levels 0.5 pF apart, %d synthetic probit units per row (μ uniform, no calibration error)\n", n)
	for ci, c := range searchConfigs {
		fmt.Fprintf(w, "\n%s\n", c.name)
		fmt.Fprintf(w, "  %-5s %-5s %7s %8s %6s %6s %6s %7s %6s\n", "SE", "σ", "floor", "samples", "÷floor", "p95/m", "rmsZ", "RMS pF", "capped")
		for _, se := range []float64{0.1, 0.05} {
			for i, sigma := range []float64{0.15, 0.25, 0.35} {
				fl, err := sequences.TripSearchFloor(levels, sigma, se, 0.5)
				if err != nil {
					t.Fatal(err)
				}
				f := searchRun(t, n, uint64(100+i), sigma, se, c.refine, c.logSD, c.peek)
				fmt.Fprintf(w, "  %-5.2f %-5.2f %7.1f %8.1f %6.2f %6.2f %6.2f %7.3f %6d\n", se, sigma, fl.Samples, f.meanSamples,
					f.meanSamples/fl.Samples, f.p95Samples/f.meanSamples, f.rmsZ, f.rmsErr, f.capped)
			}
		}
		_ = ci
	}
	fmt.Fprintln(w, "\ntargets: samples ≤ 1.25 × floor at SE 0.1 pF, ≤ 1.4 × at SE 0.05 pF; p95 ≤ 3 × mean; RMS(error/SE) 0.9–1.1")
}
