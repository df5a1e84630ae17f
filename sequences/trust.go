package sequences

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/bits"
	"slices"
	"sort"
	"strings"
	"time"
)

// This file is station trust: the shift-start reference check with its
// ladder self-test, the type-1 and gauge R&R studies, and the station's GUM
// uncertainty budget. The statistics are pure functions; CheckReference
// drives a station through the Station interface.

// ErrStudyData is returned (wrapped) by the study functions for data they
// cannot analyse.
var ErrStudyData = errors.New("sequences: unusable study data")

// ---------------------------------------------------------------------------
// Type-1 study

// Type1Result is a type-1 gauge study: one reference part measured n times.
//
// Convention (common practice, VDA 5 / company practice; from memory, no
// source at hand): Cg = 0.2·T/(6·s), Cgk = (0.1·T − |bias|)/(3·s), with T the
// width of the test limits; both ≥ 1.33 is the usual acceptance.
type Type1Result struct {
	N       int     `json:"n"`
	RefPF   float64 `json:"ref_pf"`  // the reference value
	MeanPF  float64 `json:"mean_pf"` // mean of the readings
	BiasPF  float64 `json:"bias_pf"` // mean − reference
	SDPF    float64 `json:"sd_pf"`   // repeatability: sample standard deviation (n − 1)
	TolPF   float64 `json:"tol_pf"`  // T, the test limits' width
	Cg      float64 `json:"cg"`
	Cgk     float64 `json:"cgk"`
	Capable bool    `json:"capable"` // Cg ≥ 1.33 and Cgk ≥ 1.33
}

// Type1MinIndex is the usual acceptance of Cg and Cgk (common practice, no
// source at hand).
const Type1MinIndex = 1.33

// Type1 analyses a type-1 study: readings of one reference unit whose
// reference value is refPF, against a tolerance (test limit width) tolPF.
func Type1(readings []float64, refPF, tolPF float64) (Type1Result, error) {
	n := len(readings)
	if n < 2 {
		return Type1Result{}, fmt.Errorf("type-1: %d readings, need at least 2: %w", n, ErrStudyData)
	}
	if !(tolPF > 0) {
		return Type1Result{}, fmt.Errorf("type-1: tolerance %g pF: %w", tolPF, ErrStudyData)
	}
	mean, sd := meanSD(readings)
	if math.IsNaN(mean) {
		return Type1Result{}, fmt.Errorf("type-1: a reading is not a number: %w", ErrStudyData)
	}
	r := Type1Result{N: n, RefPF: refPF, MeanPF: mean, BiasPF: mean - refPF, SDPF: sd, TolPF: tolPF}
	r.Cg = 0.2 * tolPF / (6 * sd)
	r.Cgk = (0.1*tolPF - math.Abs(r.BiasPF)) / (3 * sd)
	r.Capable = r.Cg >= Type1MinIndex && r.Cgk >= Type1MinIndex
	return r, nil
}

func meanSD(xs []float64) (mean, sd float64) {
	for _, x := range xs {
		mean += x
	}
	mean /= float64(len(xs))
	var ss float64
	for _, x := range xs {
		ss += (x - mean) * (x - mean)
	}
	if len(xs) > 1 {
		sd = math.Sqrt(ss / float64(len(xs)-1))
	}
	return mean, sd
}

// ---------------------------------------------------------------------------
// Gauge R&R, AIAG average-and-range method

// AIAG MSA 4th ed. (2010) constants of the average-and-range method
// (../shared/REFERENCES.md): K1 by trials, K2 by appraisers, K3 by parts.
var (
	aiagK1 = map[int]float64{2: 0.8862, 3: 0.5908}
	aiagK2 = map[int]float64{2: 0.7071, 3: 0.5231}
	aiagK3 = map[int]float64{2: 0.7071, 3: 0.5231, 4: 0.4467, 5: 0.4030, 6: 0.3742,
		7: 0.3534, 8: 0.3375, 9: 0.3249, 10: 0.3146}
)

// GRR verdicts by %GRR (AIAG MSA 4th ed.): below 10 % acceptable, 10–30 %
// conditional, above 30 % not acceptable.
const (
	GRRAcceptable  = "acceptable"
	GRRConditional = "conditional"
	GRRRejected    = "not acceptable"
)

// GRRResult is a gauge R&R study by the AIAG average-and-range method
// (AIAG MSA, 4th ed., 2010): every figure a standard deviation (the 4th
// edition's convention, not the older 5.15σ one).
type GRRResult struct {
	Appraisers int `json:"appraisers"`
	Parts      int `json:"parts"`
	Trials     int `json:"trials"`
	// RBarBar is the mean range over appraisers and parts; XDiff the range
	// of the appraiser averages; RP the range of the part averages.
	RBarBar float64 `json:"r_bar_bar"`
	XDiff   float64 `json:"x_diff"`
	RP      float64 `json:"r_p"`
	EV      float64 `json:"ev"`  // repeatability, R̿·K1
	AV      float64 `json:"av"`  // reproducibility, √((X̄diff·K2)² − EV²/(n·r)), 0 when negative
	GRR     float64 `json:"grr"` // √(EV² + AV²)
	PV      float64 `json:"pv"`  // part variation, Rp·K3
	TV      float64 `json:"tv"`  // √(GRR² + PV²)
	PctEV   float64 `json:"pct_ev"`
	PctAV   float64 `json:"pct_av"`
	PctGRR  float64 `json:"pct_grr"`
	PctPV   float64 `json:"pct_pv"`
	// PctTol is 100·6·GRR/tolerance when a tolerance was given, else NaN.
	PctTol float64 `json:"pct_tol"`
	// NDC is 1.41·PV/GRR truncated to a whole number (≥ 5 wanted).
	NDC     int    `json:"ndc"`
	Verdict string `json:"verdict"`
}

// GaugeRR analyses data[appraiser][part][trial] (2–3 appraisers, 2–10 parts,
// 2–3 trials, a full crossed design) by the AIAG average-and-range method.
// tolPF > 0 adds %tolerance.
func GaugeRR(data [][][]float64, tolPF float64) (GRRResult, error) {
	k := len(data)
	if k == 0 || len(data[0]) == 0 || len(data[0][0]) == 0 {
		return GRRResult{}, fmt.Errorf("gauge r&r: empty data: %w", ErrStudyData)
	}
	n, r := len(data[0]), len(data[0][0])
	for a := range data {
		if len(data[a]) != n {
			return GRRResult{}, fmt.Errorf("gauge r&r: appraiser %d has %d parts, want %d: %w", a, len(data[a]), n, ErrStudyData)
		}
		for p := range data[a] {
			if len(data[a][p]) != r {
				return GRRResult{}, fmt.Errorf("gauge r&r: appraiser %d part %d has %d trials, want %d: %w", a, p, len(data[a][p]), r, ErrStudyData)
			}
			for _, x := range data[a][p] {
				if math.IsNaN(x) || math.IsInf(x, 0) {
					return GRRResult{}, fmt.Errorf("gauge r&r: appraiser %d part %d: reading %g: %w", a, p, x, ErrStudyData)
				}
			}
		}
	}
	k1, ok1 := aiagK1[r]
	k2, ok2 := aiagK2[k]
	k3, ok3 := aiagK3[n]
	if !ok1 || !ok2 || !ok3 {
		return GRRResult{}, fmt.Errorf("gauge r&r: %d appraisers × %d parts × %d trials: the AIAG constants cover 2–3 appraisers, 2–10 parts, 2–3 trials: %w",
			k, n, r, ErrStudyData)
	}
	res := GRRResult{Appraisers: k, Parts: n, Trials: r}
	appAvg := make([]float64, k)
	partSum := make([]float64, n)
	var rsum float64
	for a := range data {
		for p := range data[a] {
			lo, hi := math.Inf(1), math.Inf(-1)
			for _, x := range data[a][p] {
				lo, hi = math.Min(lo, x), math.Max(hi, x)
				appAvg[a] += x
				partSum[p] += x
			}
			rsum += hi - lo
		}
		appAvg[a] /= float64(n * r)
	}
	res.RBarBar = rsum / float64(k*n)
	res.XDiff = slices.Max(appAvg) - slices.Min(appAvg)
	for p := range partSum {
		partSum[p] /= float64(k * r)
	}
	res.RP = slices.Max(partSum) - slices.Min(partSum)
	res.EV = res.RBarBar * k1
	av2 := math.Pow(res.XDiff*k2, 2) - res.EV*res.EV/float64(n*r)
	res.AV = math.Sqrt(math.Max(av2, 0))
	res.GRR = math.Hypot(res.EV, res.AV)
	res.PV = res.RP * k3
	res.TV = math.Hypot(res.GRR, res.PV)
	pct := func(x float64) float64 {
		if res.TV == 0 {
			return math.NaN()
		}
		return 100 * x / res.TV
	}
	res.PctEV, res.PctAV, res.PctGRR, res.PctPV = pct(res.EV), pct(res.AV), pct(res.GRR), pct(res.PV)
	res.PctTol = math.NaN()
	if tolPF > 0 {
		res.PctTol = 100 * 6 * res.GRR / tolPF
	}
	if res.GRR > 0 {
		res.NDC = int(math.Min(1.41*res.PV/res.GRR, 1e6))
	} else {
		res.NDC = 1e6
	}
	switch {
	case res.PctGRR < 10:
		res.Verdict = GRRAcceptable
	case res.PctGRR <= 30:
		res.Verdict = GRRConditional
	default:
		res.Verdict = GRRRejected
	}
	return res, nil
}

// ---------------------------------------------------------------------------
// GUM uncertainty budget

// UComponent is one standard uncertainty of a budget (sensitivity 1: every
// component is already in pF at the trip point).
type UComponent struct {
	Name   string  `json:"name"`
	Source string  `json:"source"`
	U      float64 `json:"u_pf"` // standard uncertainty, pF
}

// Budget is a combined and expanded uncertainty per GUM (JCGM 100:2008):
// u_c = √Σu_i² for uncorrelated inputs of unit sensitivity, U = k·u_c.
type Budget struct {
	Components []UComponent `json:"components"`
	UC         float64      `json:"u_c_pf"`
	K          float64      `json:"k"`
	U          float64      `json:"U_pf"`
}

// Combine returns the budget of comps with coverage factor k (JCGM 100:2008
// eq. (10) with unit sensitivities, and §6.2: U = k·u_c).
func Combine(comps []UComponent, k float64) Budget {
	var ss float64
	for _, c := range comps {
		ss += c.U * c.U
	}
	b := Budget{Components: slices.Clone(comps), K: k}
	b.UC = math.Sqrt(ss)
	b.U = k * b.UC
	return b
}

// ResolutionU is the standard uncertainty of a reading quantised in steps of
// delta: a rectangular distribution of half-width δ/2, u = δ/√12 (JCGM
// 100:2008 F.2.2.1).
func ResolutionU(delta float64) float64 { return delta / math.Sqrt(12) }

// StationBudgetInput are the figures a station's GUM budget is built from.
type StationBudgetInput struct {
	// StepPF is the local ladder step at the trip point (about the smallest
	// rung): the quantisation of a single probe.
	StepPF float64
	// CalPF is one rung's calibration standard uncertainty; ClosedRungs is
	// how many rungs are closed at the working point (their calibration
	// errors add: u = CalPF·√ClosedRungs).
	CalPF       float64
	ClosedRungs int
	// RepeatPF is the repeatability (and reproducibility) standard deviation
	// from the latest study, and RepeatSource names it; 0 = no study yet.
	RepeatPF     float64
	RepeatSource string
}

// StationBudget builds the station's budget: ladder resolution δ/√12, rung
// calibration, repeatability from the latest study; k = 2.
func StationBudget(in StationBudgetInput) Budget {
	n := max(in.ClosedRungs, 1)
	comps := []UComponent{
		{Name: "ladder resolution", Source: fmt.Sprintf("δ/√12, δ = %.3g pF", in.StepPF), U: ResolutionU(in.StepPF)},
		{Name: "rung calibration", Source: fmt.Sprintf("%.3g pF per rung × √%d rungs closed", in.CalPF, n), U: in.CalPF * math.Sqrt(float64(n))},
	}
	if in.RepeatPF > 0 {
		comps = append(comps, UComponent{Name: "repeatability", Source: in.RepeatSource, U: in.RepeatPF})
	}
	return Combine(comps, 2)
}

// ---------------------------------------------------------------------------
// Reference check and ladder self-test

// Reference is a registered reference unit: its serial, the trip point this
// station measures for it, and the allowed deviation.
type Reference struct {
	Serial       string  `json:"serial"`
	TripPF       float64 `json:"trip_pf"`
	AllowedDevPF float64 `json:"allowed_dev_pf"`
}

// CheckConfig configures CheckReference.
type CheckConfig struct {
	// RungsPF and StrayPF are the ladder as entered in the station file.
	RungsPF []float64
	StrayPF float64
	// PowerSettle is the wait after power-up; Period the latch sample
	// period without a clock pin.
	PowerSettle, Period time.Duration
	// GuardPF is the least distance of a go/no-go level from the reference
	// trip (default 0.9 pF, about 5σ of a 0.44 pF transition). The check
	// widens it to 2× the reference unit's measured 10–90 % transition
	// (≈ 5σ) when that is wider, so a go/no-go reading is certain.
	GuardPF float64
	// K is the samples per go/no-go level (default 8).
	K int
	// Fine pairs: a rung too small for a go/no-go pair gets a pair
	// straddling the measured trip (without the rung just below it, with it
	// just above), judged by how many more samples latch with the rung than
	// without it. With the unit's measured σ the healthy difference of the
	// latch-high probabilities is Δp = Φ(m/σ) − Φ(−m/σ) at the pair's
	// margin m; a stuck rung gives 0. A pair is used when Δp ≥ FineMinDP
	// (default 0.3); it takes k = 64·2p(1−p)/Δp² samples per level (4
	// standard deviations between the two outcomes and the threshold
	// Δp·k/2), at least 32 and at most FineMaxK (default 256).
	FineMinDP float64
	FineMaxK  int
	// Search tunes the trip search (defaults: SE target 0.03 pF, 96
	// refinement samples).
	Search SearchOptions
}

func (c CheckConfig) withDefaults() CheckConfig {
	if c.GuardPF <= 0 {
		c.GuardPF = 0.9
	}
	if c.K <= 0 {
		c.K = 8
	}
	if c.FineMinDP <= 0 {
		c.FineMinDP = 0.3
	}
	if c.FineMaxK <= 0 {
		c.FineMaxK = 256
	}
	if c.Search.SETargetPF == 0 {
		c.Search.SETargetPF = 0.03
	}
	if c.Search.MaxRefineSamples == 0 {
		c.Search.MaxRefineSamples = 96
	}
	return c
}

// Rung statuses of the self-test.
const (
	RungOK          = "ok"
	RungStuckOpen   = "stuck_open"
	RungStuckClosed = "stuck_closed"
	// RungDrifted: a reference deviation that, across every reference
	// unit, only this rung explains (CombineChecks).
	RungDrifted = "drifted"
	// RungDriftSuspect: one of a group of rungs a reference deviation
	// points at that the reference units cannot tell apart.
	RungDriftSuspect = "drift_suspect"
	// RungUnmeasured: this reference unit has no go/no-go or fine pair for
	// the rung (its trip sits badly on the rung's grid).
	RungUnmeasured = "not_measured"
)

// RungFinding is the self-test's verdict on one rung.
type RungFinding struct {
	Rung      int     `json:"rung"`
	EnteredPF float64 `json:"entered_pf"`
	// Test says how the rung was tested and what it read; "" when it was
	// not tested.
	Test   string `json:"test,omitempty"`
	Status string `json:"status"`
}

// RefCheck is the result of checking one reference unit.
type RefCheck struct {
	Reference
	MeasuredPF *float64 `json:"measured_pf"`
	SEPF       *float64 `json:"se_pf"`
	DevPF      *float64 `json:"dev_pf"`
	// SpreadPF is the measured 10–90 % transition; GuardPF the go/no-go
	// distance used (GuardPF of the config, or 2× the spread).
	SpreadPF *float64      `json:"spread_pf"`
	GuardPF  float64       `json:"guard_pf"`
	OK       bool          `json:"ok"`
	Rungs    []RungFinding `json:"rungs"`
	// Faults name every problem found, one line each; empty when OK.
	Faults []string `json:"faults"`
	// Suspects, for a deviation no rung test explains: what could cause it.
	Suspects string `json:"suspects,omitempty"`
	// SuspectRungs are the rungs closed at every level near the reference
	// trip, which a deviation of this reference cannot tell apart (nor
	// from the stray); Covers is the same set for a reference within its
	// allowance: the rungs (and the stray) it vouches for. CombineChecks
	// narrows one by the other.
	SuspectRungs []int         `json:"suspect_rungs,omitempty"`
	Covers       []int         `json:"covers_rungs,omitempty"`
	FixtureTime  time.Duration `json:"fixture_time_ns"`
	Searches     int           `json:"searches"`
}

// checker drives one reference check.
type checker struct {
	ctx context.Context
	st  Station
	cfg CheckConfig
	all []Level // every pattern of the ladder, by entered pF, ascending
	g   float64 // the go/no-go guard in force
}

// CheckReference powers the reference unit already in the fixture, measures
// its trip point and compares it with ref, and self-tests the ladder on it:
//   - pogo pins: a latch that never reads high, even with every rung
//     closed, is an open pad or latch pin (the two read the same: nothing
//     of the fixture reaches the unit, or nothing of the unit the fixture);
//   - go/no-go: every rung large enough gets a pair, a level at least the
//     guard below the trip without the rung and the same level with it at
//     least the guard above; the readings are tested against the healthy
//     ladder and against every single stuck-open or stuck-closed rung;
//   - fine pairs: a rung too small for that gets a pair straddling the
//     measured trip by at least FineMinPF each side, FineK samples each: a
//     working rung latches clearly more often with it than without it; a
//     stuck one reads the same both ways;
//   - deviation: a reference trip beyond its allowance that no rung test
//     explains points at the rungs closed at every level near the trip,
//     the stray, or the reference unit itself (CombineChecks narrows this
//     with the other reference units).
//
// A binary ladder has no level sets with and without a rung (other than the
// smallest) close enough together around one trip to measure the rung's
// value by a difference of two trips, so a drifted rung is found only
// through the deviation of a reference unit whose trip needs it.
//
// The station is left with power off and every rung open. An error means
// the station could not finish (pin error, lid): no verdict.
func CheckReference(ctx context.Context, st Station, clk Clock, ref Reference, cfg CheckConfig) (res RefCheck, err error) {
	cfg = cfg.withDefaults()
	res.Reference = ref
	n := len(cfg.RungsPF)
	if n == 0 || n > 16 {
		return res, fmt.Errorf("reference check: %d rungs", n)
	}
	start := clk.Now()
	defer func() {
		if herr := st.Halt(); herr != nil && err == nil {
			err = fmt.Errorf("reference check: halt: %w", herr)
		}
		res.FixtureTime = clk.Now().Sub(start)
	}()
	c := &checker{ctx: ctx, st: st, cfg: cfg, g: cfg.GuardPF}
	for p := range 1 << n {
		pf := cfg.StrayPF
		for i := range n {
			if p&(1<<i) != 0 {
				pf += cfg.RungsPF[i]
			}
		}
		c.all = append(c.all, Level{PF: pf, Pattern: uint16(p)})
	}
	sort.SliceStable(c.all, func(i, j int) bool { return c.all[i].PF < c.all[j].PF })

	closed, err := st.LidClosed()
	if err != nil {
		return res, fmt.Errorf("reference check: lid: %w", err)
	}
	if !closed {
		return res, fmt.Errorf("reference check: %w", ErrLidOpen)
	}
	if err := st.Power(true); err != nil {
		return res, fmt.Errorf("reference check: power: %w", err)
	}
	clk.Sleep(cfg.PowerSettle)

	fault := func(format string, args ...any) { res.Faults = append(res.Faults, fmt.Sprintf(format, args...)) }
	T := ref.TripPF
	allClosed := uint16(1<<n - 1)
	res.Rungs = make([]RungFinding, n)
	for r := range n {
		res.Rungs[r] = RungFinding{Rung: r, EnteredPF: cfg.RungsPF[r], Status: RungUnmeasured}
	}

	// Pogo pins: the latch must read high with every rung closed.
	lowAll, err := c.highs(0, cfg.K)
	if err != nil {
		return res, err
	}
	highAll, err := c.highs(allClosed, cfg.K)
	if err != nil {
		return res, err
	}
	if highAll == 0 && c.all[len(c.all)-1].PF > T+cfg.GuardPF {
		fault("pad or latch pogo pin open: the latch never read high, not even with every rung closed (%.1f pF)", c.all[len(c.all)-1].PF)
		res.GuardPF = c.g
		return res, nil
	}

	// The reference trip on the whole ladder.
	full, err := c.tripNear(func(uint16) bool { return true }, T)
	if err != nil {
		return res, err
	}
	res.Searches++
	center := T
	if full.Found && !full.Below {
		res.MeasuredPF, res.SEPF = ptrF(full.TripPF), ptrF(full.SEPF)
		res.DevPF = ptrF(full.TripPF - T)
		if sp := full.SpreadPF; sp > 0 && !math.IsInf(sp, 0) {
			res.SpreadPF = ptrF(sp)
			c.g = math.Max(c.g, 2*math.Min(sp, 3))
		}
		if math.Abs(full.TripPF-T) <= c.g {
			center = full.TripPF
		}
	}
	res.GuardPF = c.g

	// Go/no-go pairs for every rung large enough.
	obs := []observation{{0, lowAll}, {allClosed, highAll}}
	for r := range n {
		bit := uint16(1) << r
		q, ok := c.pairBase(r, T)
		if !ok {
			continue
		}
		lo, err := c.highs(q, cfg.K)
		if err != nil {
			return res, err
		}
		hi, err := c.highs(q|bit, cfg.K)
		if err != nil {
			return res, err
		}
		obs = append(obs, observation{q, lo}, observation{q | bit, hi})
		f := &res.Rungs[r]
		f.Status = RungOK
		f.Test = fmt.Sprintf("go/no-go %.2f → %.2f pF: %d and %d of %d high", c.pf(q), c.pf(q|bit), lo, hi, cfg.K)
	}
	// The single-fault hypotheses the go/no-go readings allow.
	healthy, sOpen, sClosed := c.explain(obs, T)
	if !healthy {
		for r := range res.Rungs {
			if res.Rungs[r].Status == RungOK {
				res.Rungs[r].Status = RungUnmeasured
			}
		}
		switch {
		case len(sOpen)+len(sClosed) == 0:
			fault("the go/no-go readings fit no single stuck rung: several ladder faults, or the reference unit is not the registered one")
		default:
			var alts []string
			for _, r := range sOpen {
				alts = append(alts, fmt.Sprintf("rung %d (%.2f pF) stuck open", r, cfg.RungsPF[r]))
				res.Rungs[r].Status = RungStuckOpen
			}
			for _, r := range sClosed {
				alts = append(alts, fmt.Sprintf("rung %d (%.2f pF) stuck closed", r, cfg.RungsPF[r]))
				res.Rungs[r].Status = RungStuckClosed
			}
			if len(alts) == 1 {
				fault("%s", alts[0])
			} else {
				fault("%s (this reference unit cannot tell them apart)", joinList(alts))
			}
		}
		return res, nil
	}

	// Fine pairs for the rungs too small for a go/no-go pair. When the
	// reference trip deviates too, a drifted larger rung in the pair's
	// base level reads the same as a stuck small rung: both are named.
	confound := ""
	if res.DevPF != nil && math.Abs(*res.DevPF) > ref.AllowedDevPF {
		confound = ", or a drifted rung in the levels near the trip (the reference trip deviates too)"
	}

	for r := range n {
		f := &res.Rungs[r]
		if f.Status != RungUnmeasured {
			continue
		}
		bit := uint16(1) << r
		// Centred on the registered trip, not the measured one: a stuck
		// rung biases the measurement, and the pair must not follow it.
		q, m := c.finePair(r, T)
		sigma := c.g / 5 // the guard is 2× the 10–90 % width, about 5σ
		if res.SpreadPF != nil {
			sigma = *res.SpreadPF / 2.5631 // 10–90 % = 2·1.2816σ
		}
		p := normCDF(m / sigma)
		dp := 2*p - 1
		if dp < cfg.FineMinDP {
			f.Test = fmt.Sprintf("no level pair straddles the trip enough (best ±%.2f pF, σ %.2f pF)", m, sigma)
			continue
		}
		k := int(math.Ceil(64 * 2 * p * (1 - p) / (dp * dp)))
		k = min(max(k, 32), cfg.FineMaxK)
		lo, err := c.highs(q, k)
		if err != nil {
			return res, err
		}
		hi, err := c.highs(q|bit, k)
		if err != nil {
			return res, err
		}
		f.Test = fmt.Sprintf("fine pair %.2f → %.2f pF (±%.2f pF about %.2f): %d and %d of %d high", c.pf(q), c.pf(q|bit), m, T, lo, hi, k)
		switch {
		case float64(hi-lo) >= dp*float64(k)/2:
			f.Status = RungOK
		case lo+hi < k:
			f.Status = RungStuckOpen
			fault("rung %d (%.2f pF) stuck open%s", r, cfg.RungsPF[r], confound)
		default:
			f.Status = RungStuckClosed
			fault("rung %d (%.2f pF) stuck closed%s", r, cfg.RungsPF[r], confound)
		}
	}

	always := c.always(center)
	switch {
	case res.DevPF == nil && len(res.Faults) == 0:
		fault("reference unit %s: no trip point found (registered %.2f pF)", ref.Serial, T)
	case res.DevPF != nil && math.Abs(*res.DevPF) > ref.AllowedDevPF:
		fault("reference unit %s: trip %.2f pF, registered %.2f pF: deviation %+.2f pF beyond ±%.2f pF",
			ref.Serial, *res.MeasuredPF, T, *res.DevPF, ref.AllowedDevPF)
		res.SuspectRungs = always
		res.Suspects = "drift of " + c.describe(always, true) + " (closed at every level near the reference trip), or of the reference unit itself"
	case res.DevPF != nil:
		res.Covers = always
	}
	res.OK = len(res.Faults) == 0
	return res, nil
}

// pf is the entered capacitance of pattern p.
func (c *checker) pf(p uint16) float64 {
	pf := c.cfg.StrayPF
	for r, v := range c.cfg.RungsPF {
		if p&(1<<r) != 0 {
			pf += v
		}
	}
	return pf
}

// observation is one go/no-go reading: K samples at a pattern.
type observation struct {
	pattern uint16
	highs   int
}

// explain tests the single-fault hypotheses against the go/no-go readings:
// whether the healthy ladder explains them, and which single stuck-open or
// stuck-closed rung would. A reading explains a hypothesis when the
// hypothesis puts the pattern at least half the guard on the side the
// reading shows (all samples high, or none), or within half the guard of
// the trip (where any reading fits).
func (c *checker) explain(obs []observation, T float64) (healthy bool, open, closed []int) {
	fits := func(stuck func(r int, on bool) bool) bool {
		for _, o := range obs {
			pf := c.cfg.StrayPF
			for r, v := range c.cfg.RungsPF {
				if stuck(r, o.pattern&(1<<r) != 0) {
					pf += v
				}
			}
			switch {
			case math.Abs(pf-T) < c.g/2:
			case pf > T && o.highs != c.cfg.K:
				return false
			case pf < T && o.highs != 0:
				return false
			}
		}
		return true
	}
	healthy = fits(func(_ int, on bool) bool { return on })
	for x := range c.cfg.RungsPF {
		if fits(func(r int, on bool) bool { return on && r != x }) {
			open = append(open, x)
		}
		if fits(func(r int, on bool) bool { return on || r == x }) {
			closed = append(closed, x)
		}
	}
	return healthy, open, closed
}

// always returns the rungs closed at every level the trip search can use
// within half the guard of T: a drift of any of them (or of the stray)
// moves this reference's measured trip by the drift.
func (c *checker) always(T float64) []int {
	mask := ^uint16(0)
	for _, lv := range c.subset(func(uint16) bool { return true }, T) {
		if math.Abs(lv.PF-T) <= c.g/2 {
			mask &= lv.Pattern
		}
	}
	var out []int
	for r := range c.cfg.RungsPF {
		if mask&(1<<r) != 0 {
			out = append(out, r)
		}
	}
	return out
}

// describe names rungs (and the stray).
func (c *checker) describe(rungs []int, stray bool) string {
	return describeRungs(c.cfg.RungsPF, rungs, stray)
}

func describeRungs(rungsPF []float64, rungs []int, stray bool) string {
	var s []string
	for _, r := range rungs {
		s = append(s, fmt.Sprintf("rung %d (%.2f pF)", r, rungsPF[r]))
	}
	if stray {
		s = append(s, "the stray")
	}
	return joinList(s)
}

func joinList(s []string) string {
	switch len(s) {
	case 0:
		return ""
	case 1:
		return s[0]
	}
	out := ""
	for i, x := range s {
		switch {
		case i == 0:
			out = x
		case i == len(s)-1:
			out += " or " + x
		default:
			out += ", " + x
		}
	}
	return out
}

func ptrF(f float64) *float64 { return &f }

// highs sets pattern p and returns the high count of k samples.
func (c *checker) highs(p uint16, k int) (int, error) {
	if err := c.ctx.Err(); err != nil {
		return 0, fmt.Errorf("reference check: %w", err)
	}
	if err := c.st.SetPattern(p); err != nil {
		return 0, fmt.Errorf("reference check: set pattern %#x: %w", p, err)
	}
	h, err := c.st.Sample(k, c.cfg.Period)
	if err != nil {
		return 0, fmt.Errorf("reference check: sample: %w", err)
	}
	return h, nil
}

// checkWindowPF is how far from the reference trip the search looks.
const checkWindowPF = 2.5

// subset returns the strictly ascending levels of the patterns keep accepts,
// within the window around T (on equal values, the first in c.all).
func (c *checker) subset(keep func(uint16) bool, T float64) []Level {
	var out []Level
	for _, lv := range c.all {
		if !keep(lv.Pattern) || math.Abs(lv.PF-T) > math.Max(checkWindowPF, c.g) {
			continue
		}
		if k := len(out); k > 0 && lv.PF <= out[k-1].PF {
			continue
		}
		out = append(out, lv)
	}
	return out
}

// pairBase finds a pattern q without rung r with q below T − guard and q + r
// above T + guard, preferring q closest to T − guard.
func (c *checker) pairBase(r int, T float64) (uint16, bool) {
	bit := uint16(1) << r
	best, found := uint16(0), false
	bestPF := math.Inf(-1)
	for _, lv := range c.all {
		if lv.Pattern&bit != 0 || lv.PF > T-c.g || lv.PF+c.cfg.RungsPF[r] < T+c.g {
			continue
		}
		if lv.PF > bestPF {
			best, bestPF, found = lv.Pattern, lv.PF, true
		}
	}
	return best, found
}

// finePair finds the pattern q without rung r whose pair (q, q + r) best
// straddles T: it maximises m = min(T − q, q + r − T), fewest rungs on ties.
func (c *checker) finePair(r int, T float64) (uint16, float64) {
	bit := uint16(1) << r
	best, bestM := uint16(0), math.Inf(-1)
	for _, lv := range c.all {
		if lv.Pattern&bit != 0 {
			continue
		}
		m := math.Min(T-lv.PF, lv.PF+c.cfg.RungsPF[r]-T)
		if m > bestM+1e-9 || (math.Abs(m-bestM) <= 1e-9 && bits.OnesCount16(lv.Pattern) < bits.OnesCount16(best)) {
			best, bestM = lv.Pattern, m
		}
	}
	return best, bestM
}

// tripNear searches the reference trip on the patterns keep accepts, near T.
func (c *checker) tripNear(keep func(uint16) bool, T float64) (TripResult, error) {
	lv := c.subset(keep, T)
	pf := make([]float64, len(lv))
	for i, l := range lv {
		pf[i] = l.PF
	}
	pr := ProberFunc(func(level, k int) (int, error) {
		if err := c.ctx.Err(); err != nil {
			return 0, err
		}
		if err := c.st.SetPattern(lv[level].Pattern); err != nil {
			return 0, fmt.Errorf("set pattern: %w", err)
		}
		return c.st.Sample(k, c.cfg.Period)
	})
	res, err := FindTrip(pr, pf, c.cfg.Search)
	if err != nil {
		return res, fmt.Errorf("reference check: trip search: %w", err)
	}
	return res, nil
}

// CombineChecks merges the checks of a station's reference units into one
// ladder verdict and one fault list. A rung's status is the worst any
// reference found; a reference deviation no rung test explains is narrowed
// by the references within their allowance: a rung (or the stray) that such
// a reference needs at its own trip is cleared. What is left is named: one
// rung is "drifted", several are "drift_suspect" (these reference units
// cannot tell them apart).
func CombineChecks(refs []RefCheck) ([]RungFinding, []string) {
	var rungs []RungFinding
	rank := map[string]int{RungUnmeasured: 0, RungOK: 1, RungDriftSuspect: 2, RungDrifted: 3, RungStuckClosed: 4, RungStuckOpen: 4}
	for _, rc := range refs {
		for _, f := range rc.Rungs {
			for len(rungs) <= f.Rung {
				rungs = append(rungs, RungFinding{Rung: len(rungs), Status: RungUnmeasured})
			}
			g := &rungs[f.Rung]
			g.EnteredPF = f.EnteredPF
			if f.Test != "" {
				if g.Test != "" {
					g.Test += "; "
				}
				g.Test += rc.Serial + ": " + f.Test
			}
			if rank[f.Status] > rank[g.Status] {
				g.Status = f.Status
			}
		}
	}
	rungsPF := make([]float64, len(rungs))
	for i, f := range rungs {
		rungsPF[i] = f.EnteredPF
	}
	cleared := map[int]bool{}
	strayCleared := false
	for _, rc := range refs {
		if rc.DevPF != nil && math.Abs(*rc.DevPF) <= rc.AllowedDevPF {
			strayCleared = true
			for _, r := range rc.Covers {
				cleared[r] = true
			}
		}
	}
	var faults []string
	for _, rc := range refs {
		for _, f := range rc.Faults {
			if rc.Suspects != "" && strings.HasPrefix(f, "reference unit "+rc.Serial+": trip") {
				var left []int
				for _, r := range rc.SuspectRungs {
					if !cleared[r] {
						left = append(left, r)
					}
				}
				stray := !strayCleared
				switch {
				case len(left) == 1 && !stray:
					f += fmt.Sprintf(": rung %d (%.2f pF) drifted, or the reference unit itself (the other reference units clear the stray and the other rungs near this trip)", left[0], rungsPF[left[0]])
					rungs[left[0]].Status = RungDrifted
				case len(left) == 0 && !stray:
					f += ": the reference unit itself has drifted (the other reference units clear the stray and every rung near its trip)"
				default:
					f += ": drift of " + describeRungs(rungsPF, left, stray) + " (these reference units cannot tell them apart), or of the reference unit itself"
					for _, r := range left {
						if rank[RungDriftSuspect] > rank[rungs[r].Status] {
							rungs[r].Status = RungDriftSuspect
						}
					}
				}
			}
			faults = append(faults, f)
		}
	}
	return rungs, faults
}

// normCDF is the standard normal distribution function.
func normCDF(z float64) float64 { return 0.5 * math.Erfc(-z/math.Sqrt2) }
