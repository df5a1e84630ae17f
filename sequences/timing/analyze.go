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
	// Gate summarises the gate effects the model includes at the nominal
	// point and how long the race is against the clock edge.
	Gate GateStats `json:"gate"`
	// Sensitivity ranks the toleranced inputs by how far each alone moves
	// the trip point across its tolerance (largest first).
	Sensitivity []Sensitivity `json:"sensitivity"`
	// Warnings are plain sentences for the test engineer; empty when the
	// design comfortably meets its spec window.
	Warnings []string `json:"warnings"`
}

// GateStats are the nominal gate figures and the race they act on.
type GateStats struct {
	// ROhm and EdgeNS are the nominal gate output resistance and 10–90 %
	// clock edge time.
	ROhm   float64 `json:"r_out_ohm"`
	EdgeNS float64 `json:"edge_ns"`
	// RaceNS is t_d − t_su at the nominal point: from CK crossing the clock
	// path's threshold to the effective sample.
	RaceNS float64 `json:"race_ns"`
	// RaceEdges is RaceNS/EdgeNS (0 with an ideal edge).
	RaceEdges float64 `json:"race_edges"`
	// ShortRace is true when the race lasts fewer than ShortRaceEdges edge
	// times.
	ShortRace bool `json:"short_race"`
	// IdealTripPF is the nominal trip point with ideal gates (R_g = 0 and
	// an ideal step), for comparison with Trip.Nominal.
	IdealTripPF float64 `json:"ideal_trip_pf"`
	// IdealClockHz is the nominal clock with an ideal gate.
	IdealClockHz float64 `json:"ideal_clock_hz"`
	// BySupply lists the inputs taken from the supply table (sorted).
	BySupply []string `json:"by_supply"`
}

// ShortRaceEdges is the race length, in clock edge times, below which
// Analyze warns: with a race of a few edges the node's decay and the
// clock's switching overlap, and a linear ramp and a single switching
// threshold are the model's least trustworthy assumptions. Ten is common
// practice for "an edge is fast against the interval", no source.
const ShortRaceEdges = 10

// Sensitivity is one input's share of the trip point's spread: the partial
// derivative ∂trip/∂input at the nominal point (a central difference) times
// the input's tolerance: 3·SD when the value states its SD (the spread the
// Monte Carlo draws), else the half range (Max − Min)/2 (3σ by the
// convention of [Normal]).
type Sensitivity struct {
	Input string `json:"input"`
	Unit  string `json:"unit"`
	// PerUnit is ∂trip/∂input in pF per unit of the input.
	PerUnit float64 `json:"dtrip_dinput"`
	// Tol is the input's tolerance at the nominal supply: 3·SD when the value
	// states an SD, else (Max − Min)/2.
	Tol float64 `json:"tolerance"`
	// PF is PerUnit × Tol: how far the input alone moves the trip point
	// from nominal to either end of its tolerance, to first order (signed).
	PF float64 `json:"trip_pf"`
	// Share is PF² over the sum of all PF² (the input's share of a
	// root-sum-square spread).
	Share float64 `json:"share"`
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
	if rep.Gate, err = gateStats(c, nom); err != nil {
		return Report{}, err
	}
	if rep.Sensitivity, err = sensitivity(c); err != nil {
		return Report{}, err
	}

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
	if g := r.Gate; g.ShortRace {
		w = append(w, fmt.Sprintf("the race lasts %.0f ns, only %.1f clock edge times (edge %.0f ns): the closed form is least trustworthy when the race is under %d edges; measure units on the bench before trusting these limits",
			g.RaceNS, g.RaceEdges, g.EdgeNS, ShortRaceEdges))
	}
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
// toleranced inputs and returns their extremes. With a supply table the
// supply's corners are its Min, its Max and every table row in between (the
// interpolated inputs bend there), and the other inputs take their Min/Max
// at that supply. A corner at which the unit cannot trip (ErrNoTrip) is
// counted, not an error; when no corner trips it is an error.
func corners(c Circuit) (cornerSet, error) {
	tLo, fLo := math.Inf(1), math.Inf(1)
	tHi, fHi := math.Inf(-1), math.Inf(-1)
	n, noTrip := 0, 0
	for _, s := range supplyCorners(c) {
		vs, err := c.valuesAt(s)
		if err != nil {
			return cornerSet{}, err
		}
		var idx []int
		for i, v := range vs {
			if i != inSupply && v.toleranced() {
				idx = append(idx, i)
			}
		}
		var p Point
		fs := p.fields()
		for i := range vs {
			*fs[i] = vs[i].Typ
		}
		p.SupplyV = s
		for mask := 0; mask < 1<<len(idx); mask++ {
			for b, i := range idx {
				if mask&(1<<b) != 0 {
					*fs[i] = vs[i].Max
				} else {
					*fs[i] = vs[i].Min
				}
			}
			n++
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
	}
	if noTrip == n {
		return cornerSet{}, fmt.Errorf("%w: the unit cannot trip at any worst-case corner", ErrNoTrip)
	}
	return cornerSet{tLo: tLo, tHi: tHi, fLo: fLo, fHi: fHi, n: n, noTrip: noTrip}, nil
}

// supplyCorners returns the supplies corners visits.
func supplyCorners(c Circuit) []float64 {
	s := c.SupplyV
	if !s.toleranced() {
		return []float64{s.Typ}
	}
	out := []float64{s.Min}
	if c.BySupply != nil {
		for _, v := range c.BySupply.SupplyV {
			if v > s.Min && v < s.Max {
				out = append(out, v)
			}
		}
	}
	return append(out, s.Max)
}

// gateStats fills the report's gate summary at the nominal point.
func gateStats(c Circuit, nom Point) (GateStats, error) {
	g := GateStats{ROhm: nom.GateROhm, EdgeNS: nom.EdgeNS, RaceNS: RaceS(nom) * 1e9, BySupply: []string{}}
	if nom.EdgeNS > 0 {
		g.RaceEdges = g.RaceNS / nom.EdgeNS
		g.ShortRace = g.RaceEdges < ShortRaceEdges
	}
	ideal := nom
	ideal.GateROhm, ideal.EdgeNS = 0, 0
	t, err := TripPF(ideal)
	if err != nil {
		return g, fmt.Errorf("nominal trip with ideal gates: %w", err)
	}
	g.IdealTripPF = t
	_, _, g.IdealClockHz = Oscillator(ideal)
	if c.BySupply != nil {
		g.BySupply = c.BySupply.names()
	}
	return g, nil
}

// sensitivity ranks the toleranced inputs by |∂trip/∂input × tolerance|. The derivative is a central difference of ±1 % of the
// tolerance around the nominal point; moving the supply moves the table's
// inputs with it (their Typ follows the supply).
func sensitivity(c Circuit) ([]Sensitivity, error) {
	vs, err := c.valuesAt(c.SupplyV.Typ)
	if err != nil {
		return nil, err
	}
	nom := c.Nominal()
	out := []Sensitivity{}
	sum := 0.0
	for i, v := range vs {
		if !v.toleranced() {
			continue
		}
		h := (v.Max - v.Min) / 100
		at := func(x float64) (float64, error) {
			p := nom
			if i == inSupply {
				q := c.Nominal()
				at, err := c.valuesAt(x)
				if err != nil {
					return 0, err
				}
				fs := q.fields()
				for k := range at {
					*fs[k] = at[k].Typ
				}
				q.SupplyV = x
				p = q
			} else {
				*p.fields()[i] = x
			}
			return TripPF(p)
		}
		lo, hi := math.Max(v.Typ-h, v.Min), math.Min(v.Typ+h, v.Max)
		tLo, err := at(lo)
		if err != nil {
			return nil, fmt.Errorf("sensitivity to %s: %w", inputNames[i], err)
		}
		tHi, err := at(hi)
		if err != nil {
			return nil, fmt.Errorf("sensitivity to %s: %w", inputNames[i], err)
		}
		d := (tHi - tLo) / (hi - lo)
		s := Sensitivity{Input: inputNames[i], Unit: inputUnits[i], PerUnit: d, Tol: (v.Max - v.Min) / 2}
		if v.SD > 0 && dist(v) == Normal {
			s.Tol = 3 * v.SD
		}
		s.PF = d * s.Tol
		sum += s.PF * s.PF
		out = append(out, s)
	}
	for k := range out {
		if sum > 0 {
			out[k].Share = out[k].PF * out[k].PF / sum
		}
	}
	slices.SortStableFunc(out, func(a, b Sensitivity) int {
		return cmpFloat(math.Abs(b.PF), math.Abs(a.PF))
	})
	return out, nil
}

func cmpFloat(a, b float64) int {
	switch {
	case a < b:
		return -1
	case a > b:
		return 1
	}
	return 0
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
	plain := c.values()
	trips = make([]float64, 0, n)
	hz = make([]float64, n)
	var p Point
	fs := p.fields()
	for k := range n {
		p.SupplyV = plain[inSupply].Draw(r)
		vs := plain
		if c.BySupply != nil {
			vs, _ = c.valuesAt(p.SupplyV) // Validate checked the table covers every supply
		}
		for i := inSupply + 1; i < numInputs; i++ {
			*fs[i] = vs[i].Draw(r)
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
