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
func searchRun(t testing.TB, n int, seed uint64, sigma, se float64, refine sequences.Refinement, logSD float64) searchFigures {
	rng := rand.New(rand.NewPCG(seed, 0x5eed))
	opt := sequences.SearchOptions{Refine: refine, SETargetPF: se, MaxRefineSamples: 2000}
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
// station's ladder (256 levels 0.5 pF apart): samples per unit against the
// floor (TripSearchFloor), p95/mean, and RMS(error/SE) at spreads σ 0.15,
// 0.25, 0.35 pF and SE targets 0.1 and 0.05 pF. Run it once:
//
//	go test ./sequences -run '^$' -bench SearchTargets -benchtime 1x
func BenchmarkSearchTargets(b *testing.B) {
	for b.Loop() {
		writeSearchTargets(b, os.Stdout, *benchUnits)
	}
}

func writeSearchTargets(t testing.TB, w io.Writer, n int) {
	levels := synthLevels()
	fmt.Fprintf(w, "trip search on 256 levels 0.5 pF apart, %d synthetic probit units per row (no calibration error)\n", n)
	fmt.Fprintf(w, "%-5s %-5s %7s | %-28s | %-28s\n", "SE", "σ", "floor", "posterior (new)", "laplace (today)")
	fmt.Fprintf(w, "%-5s %-5s %7s | %6s %5s %5s %5s %4s | %6s %5s %5s %5s %4s\n", "pF", "pF", "samples",
		"mean", "/flr", "p95/m", "rmsZ", "cap", "mean", "/flr", "p95/m", "rmsZ", "cap")
	for _, se := range []float64{0.1, 0.05} {
		for i, sigma := range []float64{0.15, 0.25, 0.35} {
			fl, err := sequences.TripSearchFloor(levels, sigma, se, 0.5)
			if err != nil {
				t.Fatal(err)
			}
			fmt.Fprintf(w, "%-5.2f %-5.2f %7.1f", se, sigma, fl.Samples)
			first := true
			for _, r := range []sequences.Refinement{sequences.Posterior, sequences.Posterior, sequences.Laplace} {
				lsd := 0.0
				if r == sequences.Posterior && first {
					lsd = 0.25
				}
				first = !first
				f := searchRun(t, n, uint64(100+i), sigma, se, r, lsd)
				fmt.Fprintf(w, " | %6.1f %5.2f %5.2f %5.2f %4d", f.meanSamples, f.meanSamples/fl.Samples,
					f.p95Samples/f.meanSamples, f.rmsZ, f.capped)
			}
			fmt.Fprintln(w)
		}
	}
	fmt.Fprintln(w, "targets: samples ≤ 1.25 × floor at SE 0.1, ≤ 1.4 × at SE 0.05; p95 ≤ 3 × mean; RMS(error/SE) 0.9–1.1")
}
