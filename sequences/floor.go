package sequences

import (
	"fmt"
	"math"
	"sort"
)

// ProbitWeight is the expected Fisher information about the 50 % point of
// one latch sample taken z standard deviations from it, in units of 1/σ²:
// w(z) = φ(z)²/(Φ(z)·Φ(−z)). It is Finney's probit weighting coefficient
// (D. J. Finney, Probit Analysis, 3rd ed., 1971: the weight nw of a dose
// group in the probit fit). Derivation: a sample reads high with p = Φ(z),
// z = (x − μ)/σ; its log-likelihood is y·ln p + (1−y)·ln(1−p), whose score
// in μ is (y − p)·(−φ(z)/σ)/(p(1−p)); the score's variance, with Var y =
// p(1−p), is φ(z)²/(σ²·p(1−p)). At z = 0 it is (1/2π)/(1/4) = 2/π.
func ProbitWeight(z float64) float64 {
	if math.Abs(z) >= 37 {
		return 0
	}
	p, q := normCDF(z), normCDF(-z)
	if !(p > 0 && q > 0) {
		return 0
	}
	ph := phi(z)
	return ph * ph / (p * q)
}

// SearchFloor is the fewest latch samples a trip search on a level set can
// expect to spend for a standard error target, when the transition's σ is
// known (so no search with σ unknown can beat it on average).
type SearchFloor struct {
	SigmaPF, SETargetPF float64
	// BracketProbes is the mean number of single-sample bisection probes
	// that locate the transition between two adjacent levels without noise.
	BracketProbes float64
	// BracketInfo is the mean Fisher information (in units of 1/SE²) those
	// probes carry about the 50 % point.
	BracketInfo float64
	// RefineSamples is the mean number of further samples, each at the
	// level nearest the 50 % point (the most informative one), needed to
	// bring the information to 1/SE² (the Cramér–Rao bound).
	RefineSamples float64
	// Samples is BracketProbes + RefineSamples.
	Samples float64
}

// floorCells is the number of 50 %-point positions per level step that
// SearchFloor averages over (midpoint rule).
const floorCells = 64

// TripSearchFloor computes the SearchFloor for a sorted level set, averaged
// over 50 % points uniform on [levels[0] + edge, levels[top] − edge]: for each
// point, the probes a noiseless bisection of the level set makes (the same
// bisection FindTrip makes, including its checks of the end levels), the
// information Σ w(zᵢ)/σ² those probes carry, and then (1/SE² − that)/(w(z*)/σ²)
// samples at the nearest level z* (none when the bracket alone reaches the
// target). w is ProbitWeight.
func TripSearchFloor(levels []float64, sigmaPF, seTargetPF, edgePF float64) (SearchFloor, error) {
	if err := checkFloorArgs(levels, sigmaPF, seTargetPF, edgePF); err != nil {
		return SearchFloor{}, err
	}
	lo, hi := levels[0]+edgePF, levels[len(levels)-1]-edgePF
	if !(hi > lo) {
		return SearchFloor{}, fmt.Errorf("edge %g pF leaves no range: %w", edgePF, ErrSearchOptions)
	}
	need := 1 / (seTargetPF * seTargetPF)
	step := (levels[len(levels)-1] - levels[0]) / float64(len(levels)-1)
	n := max(int(math.Ceil((hi-lo)/step*floorCells)), 1)
	f := SearchFloor{SigmaPF: sigmaPF, SETargetPF: seTargetPF}
	for i := range n {
		mu := lo + (hi-lo)*(float64(i)+0.5)/float64(n)
		probes, info, best := floorAt(levels, mu, sigmaPF)
		f.BracketProbes += float64(probes)
		f.BracketInfo += info / need
		f.RefineSamples += math.Max(0, need-info) / best
	}
	f.BracketProbes /= float64(n)
	f.BracketInfo /= float64(n)
	f.RefineSamples /= float64(n)
	f.Samples = f.BracketProbes + f.RefineSamples
	return f, nil
}

// floorAt follows FindTrip's bisection without noise for a 50 % point mu
// (a level reads high when it is above mu) and returns its probe count, the
// information they carry and the best one-sample information of any level.
func floorAt(levels []float64, mu, sigma float64) (probes int, info, best float64) {
	top := len(levels) - 1
	probed := make(map[int]bool)
	probe := func(l int) bool {
		probes++
		probed[l] = true
		info += ProbitWeight((levels[l]-mu)/sigma) / (sigma * sigma)
		return levels[l] > mu
	}
	lo, hi := 0, top
	for hi-lo > 1 {
		mid := lo + (hi-lo)/2
		if probe(mid) {
			hi = mid
		} else {
			lo = mid
		}
	}
	if lo == 0 && !probed[0] {
		probe(0)
	}
	if hi == top && !probed[top] {
		probe(top)
	}
	// w falls with |z|: the best level is one of the two around mu.
	j := sort.SearchFloat64s(levels, mu)
	for _, l := range []int{j - 1, j} {
		if l >= 0 && l <= top {
			best = math.Max(best, ProbitWeight((levels[l]-mu)/sigma)/(sigma*sigma))
		}
	}
	return probes, info, best
}

// TripSearchFloorAt is the floor for one trip point mu (see TripSearchFloor):
// the noiseless bisection's probes, plus the samples at the nearest level
// that bring the information to 1/SE².
func TripSearchFloorAt(levels []float64, mu, sigmaPF, seTargetPF float64) (float64, error) {
	if err := checkFloorArgs(levels, sigmaPF, seTargetPF, 0); err != nil {
		return 0, err
	}
	probes, info, best := floorAt(levels, mu, sigmaPF)
	return float64(probes) + math.Max(0, 1/(seTargetPF*seTargetPF)-info)/best, nil
}

func checkFloorArgs(levels []float64, sigmaPF, seTargetPF, edgePF float64) error {
	if len(levels) < 2 {
		return fmt.Errorf("%d levels: %w", len(levels), ErrSearchLevels)
	}
	for i := 1; i < len(levels); i++ {
		if !(levels[i] > levels[i-1]) {
			return fmt.Errorf("level %d not above level %d: %w", i, i-1, ErrSearchLevels)
		}
	}
	if !(sigmaPF > 0) || !(seTargetPF > 0) || !(edgePF >= 0) {
		return fmt.Errorf("σ %g, SE %g, edge %g: %w", sigmaPF, seTargetPF, edgePF, ErrSearchOptions)
	}
	return nil
}
