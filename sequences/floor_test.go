package sequences_test

import (
	"fmt"
	"math"
	"testing"

	"gonum.org/v1/gonum/integrate/quad"
	"gonum.org/v1/gonum/stat/distuv"

	"padline/sequences"
)

// numericWeight is the Fisher information of one Bernoulli sample about μ,
// E[(∂ ln L/∂μ)²] = Σ_y p_y·(∂ ln p_y/∂μ)², with p₁ = Φ((x−μ)/σ) from
// gonum's normal distribution and the derivative by central differences:
// an independent computation of ProbitWeight (σ = 1, x = 0, μ = −z).
func numericWeight(z float64) float64 {
	if math.Abs(z) > 30 {
		return 0 // below 1e-190: nothing a sum of samples can notice
	}
	n := distuv.UnitNormal
	// High and low probabilities each from its own tail, for precision:
	// Φ(−μ) and Φ(μ).
	p1 := func(mu float64) float64 { return n.CDF(-mu) }
	p0 := func(mu float64) float64 { return n.CDF(mu) }
	const h = 1e-5
	mu := -z
	d1 := (p1(mu+h) - p1(mu-h)) / (2 * h)
	d0 := (p0(mu+h) - p0(mu-h)) / (2 * h)
	return d1*d1/p1(mu) + d0*d0/p0(mu)
}

// TestProbitWeight checks the per-sample information against a numeric
// derivative of the Bernoulli likelihood and against its value at the 50 %
// point, 2/π (exact: φ(0)² = 1/2π over Φ(0)² = 1/4; it is also the
// asymptotic efficiency of the sign test against the mean for normal data,
// Pitman's classic result).
func TestProbitWeight(t *testing.T) {
	if got := sequences.ProbitWeight(0); math.Abs(got-2/math.Pi) > 1e-15 {
		t.Errorf("w(0) = %.17g, want 2/π = %.17g", got, 2/math.Pi)
	}
	// Finney's table of probit weighting coefficients (Probit Analysis,
	// 3rd ed., 1971; from memory, to the 3 figures quoted here): 0.637 at
	// probit 5 (z = 0), 0.439 at probits 4 and 6 (z = ∓1), 0.131 at
	// probits 3 and 7 (z = ∓2).
	for _, c := range []struct{ z, w float64 }{{0, 0.637}, {1, 0.439}, {-1, 0.439}, {2, 0.131}, {-2, 0.131}} {
		if got := sequences.ProbitWeight(c.z); math.Abs(got-c.w) > 0.0005 {
			t.Errorf("w(%g) = %.4f, Finney's table %.3f", c.z, got, c.w)
		}
	}
	for _, z := range []float64{-4, -2.5, -1, -0.3, 0.1, 0.7, 1.5, 3, 5} {
		got, want := sequences.ProbitWeight(z), numericWeight(z)
		if !(math.Abs(got-want) <= 1e-6*math.Max(want, 1e-3)) {
			t.Errorf("w(%g) = %.9g, numeric %.9g", z, got, want)
		}
		if sequences.ProbitWeight(-z) != got {
			t.Errorf("w not symmetric at %g", z)
		}
	}
}

// quadFloor is SearchFloor computed independently: Gauss–Legendre
// quadrature (gonum integrate/quad) over each interval on which the
// integrand is smooth (between consecutive levels and their midpoints),
// numericWeight for the information, and the bisection written again.
func quadFloor(levels []float64, sigma, se, edge float64) (samples, bracket float64) {
	top := len(levels) - 1
	need := 1 / (se * se)
	at := func(mu float64) (float64, float64) {
		w := func(x float64) float64 { return numericWeight((x-mu)/sigma) / (sigma * sigma) }
		var info float64
		probes := 0
		seen := map[int]bool{}
		read := func(l int) bool { probes++; seen[l] = true; info += w(levels[l]); return levels[l] > mu }
		a, b := 0, top
		for b-a > 1 {
			m := (a + b) / 2
			if read(m) {
				b = m
			} else {
				a = m
			}
		}
		if a == 0 && !seen[0] {
			read(0)
		}
		if b == top && !seen[top] {
			read(top)
		}
		best := math.Max(w(levels[a]), w(levels[b]))
		return float64(probes) + math.Max(0, need-info)/best, float64(probes)
	}
	lo, hi := levels[0]+edge, levels[top]-edge
	var cuts []float64
	for i, x := range levels {
		if x > lo && x < hi {
			cuts = append(cuts, x)
		}
		if i < top {
			if m := (x + levels[i+1]) / 2; m > lo && m < hi {
				cuts = append(cuts, m)
			}
		}
	}
	cuts = append(append([]float64{lo}, cuts...), hi)
	for i := 1; i < len(cuts); i++ {
		// Nudge the ends so each interval sees one bisection path.
		a, b := cuts[i-1]+1e-9, cuts[i]-1e-9
		samples += quad.Fixed(func(mu float64) float64 { s, _ := at(mu); return s }, a, b, 12, nil, 0)
		bracket += quad.Fixed(func(mu float64) float64 { _, p := at(mu); return p }, a, b, 12, nil, 0)
	}
	return samples / (hi - lo), bracket / (hi - lo)
}

// synthLevels is the demo station's level set without calibration errors:
// 256 levels 0.5 pF apart from 4.6 pF.
func synthLevels() []float64 {
	l := make([]float64, 256)
	for i := range l {
		l[i] = 4.6 + 0.5*float64(i)
	}
	return l
}

// TestTripSearchFloor checks the floor against the independent quadrature
// within 0.5 %, and its limit: with σ much wider than the whole ladder every
// sample carries w(0)/σ² = (2/π)/σ², so the floor is (π/2)·(σ/SE)² samples.
func TestTripSearchFloor(t *testing.T) {
	levels := synthLevels()
	for _, se := range []float64{0.1, 0.05} {
		for _, sigma := range []float64{0.15, 0.25, 0.35} {
			t.Run(fmt.Sprintf("se=%.2f/sigma=%.2f", se, sigma), func(t *testing.T) {
				f, err := sequences.TripSearchFloor(levels, sigma, se, 0.5)
				if err != nil {
					t.Fatal(err)
				}
				want, wantB := quadFloor(levels, sigma, se, 0.5)
				t.Logf("floor %.2f samples (bracket %.2f probes carrying %.1f %% of 1/SE², refine %.2f); quadrature %.2f",
					f.Samples, f.BracketProbes, 100*f.BracketInfo, f.RefineSamples, want)
				if !(math.Abs(f.Samples-want) <= 0.005*want) || !(math.Abs(f.BracketProbes-wantB) <= 0.005*wantB) {
					t.Errorf("floor %.4f (bracket %.4f), quadrature %.4f (%.4f)", f.Samples, f.BracketProbes, want, wantB)
				}
			})
		}
	}
	// Wide σ on a fine ladder: every level is near the 50 % point.
	fine := make([]float64, 64)
	for i := range fine {
		fine[i] = 0.01 * float64(i)
	}
	f, err := sequences.TripSearchFloor(fine, 10, 1, 0.01)
	if err != nil {
		t.Fatal(err)
	}
	// Each bracket probe then carries one refinement sample's information,
	// so bracket plus refinement is the whole (π/2)(σ/SE)².
	if want := math.Pi / 2 * 100; !(math.Abs(f.Samples-want) <= 0.001*want) {
		t.Errorf("wide σ: %.3f samples, want (π/2)(σ/SE)² = %.3f", f.Samples, want)
	}
}

// TestTripSearchFloorAt: the per-trip-point floor averages to the floor.
func TestTripSearchFloorAt(t *testing.T) {
	levels := synthLevels()
	f, err := sequences.TripSearchFloor(levels, 0.25, 0.1, 0.5)
	if err != nil {
		t.Fatal(err)
	}
	lo, hi := levels[0]+0.5, levels[255]-0.5
	n := int(math.Ceil((hi - lo) / 0.5 * 64)) // TripSearchFloor's midpoint cells
	var sum float64
	for i := range n {
		s, err := sequences.TripSearchFloorAt(levels, lo+(hi-lo)*(float64(i)+0.5)/float64(n), 0.25, 0.1)
		if err != nil {
			t.Fatal(err)
		}
		sum += s
	}
	if got := sum / float64(n); !(math.Abs(got-f.Samples) <= 1e-9*f.Samples) {
		t.Errorf("mean of TripSearchFloorAt %.6f, TripSearchFloor %.6f", got, f.Samples)
	}
	if _, err := sequences.TripSearchFloorAt(levels, 30, 0, 0.1); err == nil {
		t.Error("σ 0 accepted")
	}
}
