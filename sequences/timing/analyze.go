package timing

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"

	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"
)

// DefaultDraws is the Monte Carlo sample size when Options.Draws is zero.
const DefaultDraws = 20000

// MinCpk is the predicted Cpk below which Analyze warns. 1.33 (±4σ inside
// the window) is common industrial practice; no standard fixes it.
const MinCpk = 1.33

// Spec is a variant's spec window on the trip point: the unit must not trip
// at or below NoTripAtPF (idle or moisture capacitance at the pad) and must
// trip at or below TripByPF (the weakest touch). So a good trip point lies in
// (NoTripAtPF, TripByPF].
type Spec struct {
	NoTripAtPF float64 `json:"no_trip_at_pf"`
	TripByPF   float64 `json:"trip_by_pf"`
}

// Check reports whether the window is well formed (finite, low < high).
func (s Spec) Check() error {
	if math.IsNaN(s.NoTripAtPF) || math.IsNaN(s.TripByPF) || math.IsInf(s.NoTripAtPF, 0) || math.IsInf(s.TripByPF, 0) {
		return fmt.Errorf("spec window not finite")
	}
	if s.NoTripAtPF >= s.TripByPF {
		return fmt.Errorf("spec window empty: no_trip_at %g pF ≥ trip_by %g pF", s.NoTripAtPF, s.TripByPF)
	}
	return nil
}

// Options tunes Analyze.
type Options struct {
	// Draws is the Monte Carlo sample size; 0 means DefaultDraws.
	Draws int
	// Seed makes the Monte Carlo reproducible: the same seed gives the same
	// numbers.
	Seed uint64
	// UncertaintyPF is the station's expanded measurement uncertainty U
	// (k = 2) in pF; the guard band shrinks each limit by U.
	UncertaintyPF float64
}

// Limits is a closed interval of trip points in pF.
type Limits struct {
	Low  float64 `json:"low"`
	High float64 `json:"high"`
}

// TripStats describes the predicted trip point (external pF at the pad).
type TripStats struct {
	Nominal    float64 `json:"nominal"`
	CornerLow  float64 `json:"corner_low"`
	CornerHigh float64 `json:"corner_high"`
	MCMean     float64 `json:"mc_mean"`
	MCSD       float64 `json:"mc_sd"`
	// MCP00135, MCP50, MCP99865 are the 0.135 %, 50 % and 99.865 %
	// percentiles of the Monte Carlo draws (±3σ equivalents).
	MCP00135 float64 `json:"mc_p00135"`
	MCP50    float64 `json:"mc_p50"`
	MCP99865 float64 `json:"mc_p99865"`
	// NoTripDraws counts Monte Carlo draws that never trip (left out of the
	// statistics, counted as out of spec for the yield).
	NoTripDraws int `json:"no_trip_draws"`
	// NoTripCorners counts worst-case corners at which the unit cannot
	// trip (e.g. setup ≥ delay: the flip-flop samples before the sense
	// node can fall); the corner figures come from the others.
	NoTripCorners int `json:"no_trip_corners"`
	// Corners is how many corners were evaluated.
	Corners int `json:"corners"`
}

// ClockStats describes the predicted oscillator frequency in Hz.
type ClockStats struct {
	Nominal    float64 `json:"nominal"`
	CornerLow  float64 `json:"corner_low"`
	CornerHigh float64 `json:"corner_high"`
	MCMean     float64 `json:"mc_mean"`
	MCSD       float64 `json:"mc_sd"`
	// HighS and LowS are the nominal half periods in seconds.
	HighS float64 `json:"t_high_s"`
	LowS  float64 `json:"t_low_s"`
}

// Capability is the design's predicted capability against the spec window.
type Capability struct {
	// Cpk = min(USL−μ, μ−LSL)/3σ from the Monte Carlo mean and sd. A design
	// with no spread at all reports a very large but finite Cpk.
	Cpk float64 `json:"cpk"`
	// Yield is the fraction of Monte Carlo draws inside the spec window.
	Yield float64 `json:"yield"`
	// YieldNormal is the yield of a normal distribution with the Monte Carlo
	// mean and sd.
	YieldNormal float64 `json:"yield_normal"`
}

// Report is everything Analyze predicts for one variant. It serialises to the
// JSON that `padline limits --json` prints.
type Report struct {
	Trip  TripStats  `json:"trip_pf"`
	Clock ClockStats `json:"clock_hz"`
	// ModelLimits is the worst-case range of trip points the bill of
	// materials allows (the corners).
	ModelLimits Limits `json:"model_limits_pf"`
	Spec        Spec   `json:"spec_pf"`
	// UncertaintyPF is U (k = 2); GuardBandPF is what each limit is shrunk by
	// (ISO 14253-1: equal to U).
	UncertaintyPF float64 `json:"uncertainty_pf"`
	GuardBandPF   float64 `json:"guard_band_pf"`
	// TestLimits is the tighter of ModelLimits and Spec, each side shrunk by
	// the guard band. Low ≥ High means no unit can be passed (see Warnings).
	TestLimits Limits     `json:"test_limits_pf"`
	Predicted  Capability `json:"predicted"`
	Draws      int        `json:"draws"`
	Seed       uint64     `json:"seed"`
	// Warnings are plain sentences for the test engineer; empty when the
	// design comfortably meets its spec window.
	Warnings []string `json:"warnings"`
}

// Analyze predicts the trip point and clock of circuit c over its tolerances
// (nominal, worst-case corners, Monte Carlo), sets them against the spec
// window, and derives guard-banded test limits and the predicted Cpk and
// yield.
//
// Corners: every combination of Min/Max over the toleranced inputs is
// evaluated (at most 2^11 = 2048 points), so no monotonicity is assumed
// between them; the Monte Carlo draws are then checked to lie inside the
// corners and a warning is added if any does not.
func Analyze(c Circuit, spec Spec, opt Options) (Report, error) {
	if err := c.Validate(); err != nil {
		return Report{}, err
	}
	if err := spec.Check(); err != nil {
		return Report{}, fmt.Errorf("timing: %w", err)
	}
	if opt.Draws < 0 {
		return Report{}, fmt.Errorf("timing: negative draws %d", opt.Draws)
	}
	u := opt.UncertaintyPF
	if u < 0 || math.IsNaN(u) || math.IsInf(u, 0) {
		return Report{}, fmt.Errorf("timing: uncertainty must be a finite value ≥ 0, got %g", u)
	}
	draws := opt.Draws
	if draws == 0 {
		draws = DefaultDraws
	}
	rep := Report{Spec: spec, UncertaintyPF: u, GuardBandPF: u, Draws: draws, Seed: opt.Seed, Warnings: []string{}}

	nom := c.Nominal()
	trip, err := TripPF(nom)
	if err != nil {
		return Report{}, fmt.Errorf("nominal trip: %w", err)
	}
	rep.Trip.Nominal = trip
	rep.Clock.HighS, rep.Clock.LowS, rep.Clock.Nominal = Oscillator(nom)

	cs, err := corners(c)
	if err != nil {
		return Report{}, err
	}
	tLo, tHi := cs.tLo, cs.tHi
	rep.Trip.CornerLow, rep.Trip.CornerHigh = tLo, tHi
	rep.Trip.NoTripCorners, rep.Trip.Corners = cs.noTrip, cs.n
	fLo, fHi := cs.fLo, cs.fHi
	rep.Clock.CornerLow, rep.Clock.CornerHigh = fLo, fHi
	rep.ModelLimits = Limits{Low: tLo, High: tHi}

	trips, hz, noTrip := monteCarlo(c, draws, opt.Seed)
	rep.Trip.NoTripDraws = noTrip
	rep.Clock.MCMean, rep.Clock.MCSD = stat.MeanStdDev(hz, nil)
	inside := 0
	for _, t := range trips {
		if t > spec.NoTripAtPF && t <= spec.TripByPF {
			inside++
		}
	}
	rep.Predicted.Yield = float64(inside) / float64(draws)
	if len(trips) > 1 {
		rep.Trip.MCMean, rep.Trip.MCSD = stat.MeanStdDev(trips, nil)
		slices.Sort(trips)
		rep.Trip.MCP00135 = stat.Quantile(0.00135, stat.Empirical, trips, nil)
		rep.Trip.MCP50 = stat.Quantile(0.5, stat.Empirical, trips, nil)
		rep.Trip.MCP99865 = stat.Quantile(0.99865, stat.Empirical, trips, nil)
		sd := math.Max(rep.Trip.MCSD, 1e-12)
		m := rep.Trip.MCMean
		rep.Predicted.Cpk = math.Min(spec.TripByPF-m, m-spec.NoTripAtPF) / (3 * sd)
		n := distuv.UnitNormal
		rep.Predicted.YieldNormal = n.CDF((spec.TripByPF-m)/sd) - n.CDF((spec.NoTripAtPF-m)/sd)
		if trips[0] < tLo-1e-9*math.Abs(tLo)-1e-12 || trips[len(trips)-1] > tHi+1e-9*math.Abs(tHi)+1e-12 {
			rep.Warnings = append(rep.Warnings, fmt.Sprintf(
				"Monte Carlo draws reach %.3f..%.3f pF, outside the corners %.3f..%.3f pF: the model is not monotone here, widen the model limits by hand",
				trips[0], trips[len(trips)-1], tLo, tHi))
		}
	}

	low := math.Max(tLo, spec.NoTripAtPF) + u
	high := math.Min(tHi, spec.TripByPF) - u
	rep.TestLimits = Limits{Low: low, High: high}
	rep.Warnings = append(rep.Warnings, warnings(rep)...)
	return rep, nil
}

// warnings returns the plain-language warnings for a filled report.
func warnings(r Report) []string {
	var w []string
	t, s := r.Trip, r.Spec
	if t.NoTripCorners > 0 {
		w = append(w, fmt.Sprintf("at %d of %d worst-case corners the unit cannot trip (the flip-flop samples before the sense node can fall, e.g. setup ≥ delay): a unit built at such a corner latches whatever the pad carries and fails idle_latched", t.NoTripCorners, t.Corners))
	}
	if t.NoTripDraws > 0 {
		w = append(w, fmt.Sprintf("%d of %d Monte Carlo draws never trip: those units would fail no_trip", t.NoTripDraws, r.Draws))
	}
	if t.Nominal <= s.NoTripAtPF || t.Nominal > s.TripByPF {
		w = append(w, fmt.Sprintf("the nominal trip point %.2f pF lies outside the spec window (%.2f, %.2f] pF: the design cannot meet its spec", t.Nominal, s.NoTripAtPF, s.TripByPF))
	}
	if t.MCP00135 <= s.NoTripAtPF || t.MCP99865 > s.TripByPF {
		w = append(w, fmt.Sprintf("the design's ±3σ spread %.2f..%.2f pF does not fit inside the spec window (%.2f, %.2f] pF", t.MCP00135, t.MCP99865, s.NoTripAtPF, s.TripByPF))
	}
	if r.Predicted.Cpk < MinCpk {
		w = append(w, fmt.Sprintf("predicted Cpk %.2f is below %.2f: a normal model puts %.0f ppm of units outside the spec window", r.Predicted.Cpk, MinCpk, 1e6*(1-r.Predicted.YieldNormal)))
	}
	if t.CornerLow <= s.NoTripAtPF || t.CornerHigh > s.TripByPF {
		w = append(w, fmt.Sprintf("worst-case corners %.2f..%.2f pF exceed the spec window: only the statistical spread, not the guaranteed tolerances, keeps units inside", t.CornerLow, t.CornerHigh))
	}
	if r.TestLimits.Low >= r.TestLimits.High {
		w = append(w, fmt.Sprintf("test limits collapse (%.2f ≥ %.2f pF): the guard band of %.2f pF leaves no acceptance zone; reduce the station's uncertainty", r.TestLimits.Low, r.TestLimits.High, r.GuardBandPF))
	} else if p := r.Trip; p.MCP00135 < r.TestLimits.Low || p.MCP99865 > r.TestLimits.High {
		w = append(w, spreadWarning(p, r.TestLimits))
	}
	return w
}

// spreadWarning says how the design's ±3σ spread passes the test limits:
// wider than them, or as narrow or narrower but shifted past one of them.
func spreadWarning(p TripStats, l Limits) string {
	spread := fmt.Sprintf("the design's ±3σ spread %.2f..%.2f pF", p.MCP00135, p.MCP99865)
	lim := fmt.Sprintf("the test limits %.2f..%.2f pF", l.Low, l.High)
	if p.MCP99865-p.MCP00135 > l.High-l.Low {
		return spread + " is wider than " + lim + ": good units will be rejected by the guard band"
	}
	side := "above the high limit"
	if p.MCP00135 < l.Low {
		side = "below the low limit"
	}
	return spread + " is narrower than " + lim + " but shifted " + side + ": good units will be rejected there; the design's centre, not its spread, needs attention"
}

// cornerSet is the extremes of trip point and clock over the corners.
type cornerSet struct {
	tLo, tHi, fLo, fHi float64
	n, noTrip          int
}

// corners evaluates trip point and clock at every Min/Max combination of the
// toleranced inputs and returns their extremes. A corner at which the unit
// cannot trip (ErrNoTrip) is counted, not an error; when no corner trips
// the trip extremes are NaN.
func corners(c Circuit) (cornerSet, error) {
	vs := c.values()
	var idx []int
	for i, v := range vs {
		if v.toleranced() {
			idx = append(idx, i)
		}
	}
	tLo, fLo := math.Inf(1), math.Inf(1)
	tHi, fHi := math.Inf(-1), math.Inf(-1)
	noTrip := 0
	p := c.Nominal()
	fs := p.fields()
	for mask := 0; mask < 1<<len(idx); mask++ {
		for b, i := range idx {
			if mask&(1<<b) != 0 {
				*fs[i] = vs[i].Max
			} else {
				*fs[i] = vs[i].Min
			}
		}
		_, _, f := Oscillator(p)
		fLo, fHi = math.Min(fLo, f), math.Max(fHi, f)
		t, err := TripPF(p)
		if errors.Is(err, ErrNoTrip) {
			noTrip++
			continue
		}
		if err != nil {
			return cornerSet{}, fmt.Errorf("corner %s: %w", describe(p), err)
		}
		tLo, tHi = math.Min(tLo, t), math.Max(tHi, t)
	}
	n := 1 << len(idx)
	if noTrip == n {
		return cornerSet{}, fmt.Errorf("%w: the unit cannot trip at any worst-case corner", ErrNoTrip)
	}
	return cornerSet{tLo: tLo, tHi: tHi, fLo: fLo, fHi: fHi, n: n, noTrip: noTrip}, nil
}

// describe names a point's values for an error message.
func describe(p Point) string {
	s := ""
	for i, f := range p.fields() {
		if i > 0 {
			s += " "
		}
		s += fmt.Sprintf("%s=%.4g", inputNames[i], *f)
	}
	return s
}

// monteCarlo draws n points of c with a PCG generator seeded by seed and
// returns the trip points of the draws that trip, the clock frequency of every
// draw, and the number of draws that never trip.
func monteCarlo(c Circuit, n int, seed uint64) (trips, hz []float64, noTrip int) {
	r := rand.New(rand.NewPCG(seed, 0x7061646c696e65)) // "padline"
	vs := c.values()
	trips = make([]float64, 0, n)
	hz = make([]float64, n)
	var p Point
	fs := p.fields()
	for k := range n {
		for i, v := range vs {
			*fs[i] = v.Draw(r)
		}
		_, _, hz[k] = Oscillator(p)
		t, err := TripPF(p)
		if err != nil {
			noTrip++
			continue
		}
		trips = append(trips, t)
	}
	return trips, hz, noTrip
}
