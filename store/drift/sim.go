package drift

import (
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"sort"
	"sync"
)

// SimConfig describes a seeded run-length study of a chart set on
// independent normal values (μ = 0, σ = 1 in control).
type SimConfig struct {
	Set     Set
	Options Options // widths, λ, L, k, h, head start; Target/Sigma are ignored
	// Shift is the step in σ units; 0 measures the in-control run length.
	Shift float64
	// Before is the number of in-control points before the step. 0 gives
	// the zero-state run length (step from the first point); > 0 the
	// steady-state lag, discarding runs that alarm before the step.
	Before int
	// Baseline > 0 estimates target and σ (mean, MR̄/d2) from that many
	// in-control points drawn first in each run, as phase I would; 0 uses
	// the true μ = 0, σ = 1.
	Baseline int
	Runs     int
	Seed     uint64
	// Max caps the points watched after the step (or from the start);
	// longer runs count as censored at Max. 0 means 100000.
	Max int
}

// SimResult summarises run lengths: the number of points from the step
// (or the first point when Shift = 0) up to and including the first alarm.
type SimResult struct {
	Runs     int // runs that count towards the figures
	Early    int // runs discarded for a false alarm before the step
	Censored int // runs with no alarm within Max (counted as Max)
	Mean     float64
	SE       float64 // standard error of Mean
	Median   float64
	P10, P90 float64
	ByRule   map[Rule]int // rule of the first alarm, over counted runs
}

// SimulateRunLength runs the study. Run r draws from a PCG generator
// seeded (Seed, r), so figures do not depend on the number of CPUs.
func SimulateRunLength(cfg SimConfig) (SimResult, error) {
	if cfg.Runs <= 0 || cfg.Before < 0 || cfg.Baseline < 0 || cfg.Baseline == 1 {
		return SimResult{}, fmt.Errorf("simulate: runs %d, before %d, baseline %d: %w", cfg.Runs, cfg.Before, cfg.Baseline, ErrParam)
	}
	if cfg.Max == 0 {
		cfg.Max = 100000
	}
	if _, err := NewMonitor(0, 1, cfg.Options, cfg.Set); err != nil {
		return SimResult{}, fmt.Errorf("simulate: %w", err)
	}
	type one struct {
		n        int
		rule     Rule
		early    bool
		censored bool
	}
	res := make([]one, cfg.Runs)
	var wg sync.WaitGroup
	next := make(chan int)
	for w := 0; w < runtime.GOMAXPROCS(0); w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			base := make([]float64, cfg.Baseline)
			for r := range next {
				rng := rand.New(rand.NewPCG(cfg.Seed, uint64(r)))
				o := cfg.Options
				target, sigma := 0.0, 1.0
				if cfg.Baseline > 0 {
					for i := range base {
						base[i] = rng.NormFloat64()
					}
					e, err := estimateIndividuals(base, FirstN(len(base)), Options{})
					if err != nil { // zero spread: cannot happen with normal draws
						e = estimate{0, 1, ""}
					}
					target, sigma = e.mean, e.sigma
				}
				m, _ := NewMonitor(target, sigma, o, cfg.Set)
				res[r] = one{n: cfg.Max, censored: true}
				for i := 0; i < cfg.Before+cfg.Max; i++ {
					x := rng.NormFloat64()
					if i >= cfg.Before {
						x += cfg.Shift
					}
					if a := m.Add(x); len(a) > 0 {
						if i < cfg.Before {
							res[r] = one{early: true}
						} else {
							res[r] = one{n: i - cfg.Before + 1, rule: a[0].Rule}
						}
						break
					}
				}
			}
		}()
	}
	for r := 0; r < cfg.Runs; r++ {
		next <- r
	}
	close(next)
	wg.Wait()

	out := SimResult{ByRule: map[Rule]int{}}
	var ns []float64
	for _, o := range res {
		switch {
		case o.early:
			out.Early++
			continue
		case o.censored:
			out.Censored++
		default:
			out.ByRule[o.rule]++
		}
		ns = append(ns, float64(o.n))
	}
	out.Runs = len(ns)
	if len(ns) == 0 {
		return out, fmt.Errorf("simulate: every run alarmed before the step: %w", ErrParam)
	}
	sort.Float64s(ns)
	var s, ss float64
	for _, v := range ns {
		s += v
	}
	out.Mean = s / float64(len(ns))
	for _, v := range ns {
		ss += (v - out.Mean) * (v - out.Mean)
	}
	if len(ns) > 1 {
		out.SE = math.Sqrt(ss/float64(len(ns)-1)) / math.Sqrt(float64(len(ns)))
	}
	out.Median = quantile(ns, 0.5)
	out.P10, out.P90 = quantile(ns, 0.1), quantile(ns, 0.9)
	return out, nil
}

// quantile of sorted v by linear interpolation between order statistics.
func quantile(v []float64, p float64) float64 {
	h := p * float64(len(v)-1)
	lo := math.Floor(h)
	if int(lo)+1 >= len(v) {
		return v[len(v)-1]
	}
	return v[int(lo)] + (h-lo)*(v[int(lo)+1]-v[int(lo)])
}

// StudyRow is one line of Study: a chart set at one step size, with the
// published figure where one exists (NaN otherwise) and its source.
type StudyRow struct {
	Chart     string
	Shift     float64 // σ units; 0 = in control
	Result    SimResult
	Published float64 // published ARL (zero-state, known parameters); NaN if none
	Source    string
}

// studyCase is a chart set with its published ARLs at shifts 0, 0.5, 1, 2.
type studyCase struct {
	name   string
	set    Set
	o      Options
	arl    [4]float64
	source string
}

var nan = math.NaN()

// RSpcVersion is the version of the R package spc that computed the
// reference run lengths below (R spc: Knoth, "spc: Statistical Process
// Control — Calculation of ARL and Other Control Chart Performance
// Measures", CRAN). The test TestStudyMatchesRSpc recomputes them with R.
const RSpcVersion = "0.6.7"

// studyCases pairs each chart set with reference zero-state ARLs (known
// parameters) at shifts 0, 0.5, 1, 2 σ:
//   - Shewhart 3σ: exact, the run length is geometric with
//     p = P(|Z+δ| > 3);
//   - two-sided tabular CUSUM (two one-sided sums, k = 0.5, no head start):
//     R spc xcusum.arl(k = 0.5, h, mu = δ, sided = "two");
//   - EWMA with exact (time-varying) limits, z_0 = target: R spc
//     xewma.arl(l = 0.2, c = 2.86, mu = δ, zr = 0, sided = "two",
//     limits = "vacl").
//
// The Western Electric and Nelson sets have no reference here (R spc's
// runs-rule functions do not cover rules 1–4 together), and print none.
var studyCases = []studyCase{
	{"default (individuals 3σ + CUSUM k=0.5 h=5)", DefaultSet, Options{}, [4]float64{nan, nan, nan, nan}, ""},
	{"individuals 3σ only", Set{Rules: LimitsOnly}, Options{}, [4]float64{370.4, 155.2, 43.89, 6.303}, "exact: 1/P(|Z+δ| > 3)"},
	{"individuals + Western Electric 1–4", Set{Rules: WesternElectric}, Options{}, [4]float64{nan, nan, nan, nan}, ""},
	{"individuals + Nelson 1–8", Set{Rules: NelsonRules}, Options{}, [4]float64{nan, nan, nan, nan}, ""},
	{"CUSUM k=0.5 h=4", Set{CUSUM: true}, Options{H: 4}, [4]float64{167.68, 26.630, 8.3831, 3.3428}, "R spc xcusum.arl, two-sided"},
	{"CUSUM k=0.5 h=5", Set{CUSUM: true}, Options{H: 5}, [4]float64{465.44, 37.996, 10.376, 4.0089}, "R spc xcusum.arl, two-sided"},
	{"EWMA λ=0.2 L=2.86 (exact limits)", Set{EWMA: true}, Options{}, [4]float64{365.86, 34.751, 8.7946, 2.7132}, "R spc xewma.arl, vacl limits"},
}

// StudyShifts are the step sizes Study measures, in σ.
var StudyShifts = []float64{0, 0.5, 1, 2}

// Study measures zero-state run lengths with known parameters for the
// default set and the textbook charts at StudyShifts, runs per cell, and
// pairs them with published figures. A command can print the rows as a
// table; see the package tests for the figures at seed 1.
func Study(runs int, seed uint64) ([]StudyRow, error) {
	var out []StudyRow
	for _, c := range studyCases {
		for i, s := range StudyShifts {
			r, err := SimulateRunLength(SimConfig{Set: c.set, Options: c.o, Shift: s, Runs: runs, Seed: seed})
			if err != nil {
				return nil, fmt.Errorf("study %s at %gσ: %w", c.name, s, err)
			}
			src := c.source
			if math.IsNaN(c.arl[i]) {
				src = ""
			}
			out = append(out, StudyRow{Chart: c.name, Shift: s, Result: r, Published: c.arl[i], Source: src})
		}
	}
	return out, nil
}
