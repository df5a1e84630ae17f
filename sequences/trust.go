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
	// CalPF is one rung's calibration standard uncertainty (default 0.05
	// pF, the LCR meter's at these values, DESIGN.md §12). A level's offset
	// from the reference trip is known to ±CalPF·√(rungs it does not share
	// with the trip's level).
	CalPF float64
	// K is the first samples per level of a rung pair (default 8; 32 for
	// a pair that straddles the trip by less than 4σ); MaxK the most
	// samples one level gets by re-probing (default 512).
	K, MaxK int
	// DecideNats is the log likelihood ratio by which a stuck rung must
	// explain the pair readings better than the healthy ladder before it is
	// named (default ln 10⁶); AcceptNats the ratio by which the healthy
	// ladder must beat every stuck rung to end re-probing (default ln 10³).
	DecideNats, AcceptNats float64
	// MaxSearches is how many trip searches are pooled when the first
	// deviation lies within 3 standard errors of the allowance (default 4).
	MaxSearches int
	// Search tunes the trip search (defaults: SE target 0.03 pF, 96
	// refinement samples).
	Search SearchOptions
}

func (c CheckConfig) withDefaults() CheckConfig {
	if c.CalPF <= 0 {
		c.CalPF = 0.05
	}
	if c.K <= 0 {
		c.K = 8
	}
	if c.MaxK <= 0 {
		c.MaxK = 512
	}
	if c.DecideNats <= 0 {
		c.DecideNats = math.Log(1e6)
	}
	if c.AcceptNats <= 0 {
		c.AcceptNats = math.Log(1e3)
	}
	if c.MaxSearches <= 0 {
		c.MaxSearches = 4
	}
	if c.Search.SETargetPF == 0 {
		c.Search.SETargetPF = 0.03
	}
	if c.Search.Refine == "" {
		// The reference check's allowances and rung inference were set
		// on the Laplace search's probes; it keeps them.
		c.Search.Refine = Laplace
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
	// RungDrifted: the reference deviations, taken together, point at this
	// rung alone (CombineChecks).
	RungDrifted = "drifted"
	// RungDriftSuspect: one of several rungs (or the stray) the reference
	// deviations fit equally well.
	RungDriftSuspect = "drift_suspect"
	// RungUnmeasured: the pair readings of this reference unit could not
	// tell the rung stuck from healthy within the sample budget.
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
	// MeasuredPF is the mean of the pooled trip searches, SEPF its
	// standard error (twice the searches' own, which understate it when the
	// trip falls between widely spaced levels), DevPF MeasuredPF − TripPF.
	MeasuredPF *float64 `json:"measured_pf"`
	SEPF       *float64 `json:"se_pf"`
	DevPF      *float64 `json:"dev_pf"`
	// SpreadPF is the measured 10–90 % transition (first search).
	SpreadPF *float64      `json:"spread_pf"`
	OK       bool          `json:"ok"`
	Rungs    []RungFinding `json:"rungs"`
	// Faults name every problem found, one line each; empty when OK.
	Faults []string `json:"faults"`
	// Suspects, for a deviation beyond the allowance: the rungs this
	// reference's trip mostly rests on (CombineChecks narrows it with the
	// other reference units).
	Suspects string `json:"suspects,omitempty"`
	// RungWeights[r] is how much of a drift of rung r this reference's
	// measured trip takes up (0–1): the share of the trip searches' Fisher
	// information on levels with rung r closed. A drift of the stray moves
	// every reference by its full size. Empty when no trip was measured.
	RungWeights []float64 `json:"rung_weights,omitempty"`
	// StuckFound is true when the pair readings named a stuck rung: the
	// deviation then says nothing about drift.
	StuckFound bool `json:"stuck_found,omitempty"`
	// StuckLLR is the log likelihood ratio (nats) of the best single stuck
	// rung against the healthy ladder on the pair readings: named from
	// CheckConfig.DecideNats up, the healthy ladder accepted from
	// −AcceptNats down.
	StuckLLR    float64       `json:"stuck_llr"`
	FixtureTime time.Duration `json:"fixture_time_ns"`
	Searches    int           `json:"searches"`
	// PairSamples counts the latch samples of the rung pairs and pogo
	// levels, re-probes included.
	PairSamples int `json:"pair_samples"`
}

// checker drives one reference check.
type checker struct {
	ctx  context.Context
	st   Station
	cfg  CheckConfig
	all  []Level // every pattern of the ladder, by entered pF, ascending
	memo map[llKey]float64
}

// CheckReference powers the reference unit already in the fixture, measures
// its trip point and compares it with ref, and self-tests the ladder on it.
//
//   - Pogo pins: a latch that never reads high, even with every rung
//     closed, is an open pad or latch pin (the two read the same: nothing
//     of the fixture reaches the unit, or nothing of the unit the fixture).
//   - Trip: a trip search on the whole ladder near the registered trip.
//   - Rung pairs: for every rung r, the level q without r and q + r that
//     best straddle the trip. With a healthy ladder the two sit C_r apart
//     across the trip; with r stuck they are the same circuit and read
//     alike; a stuck rung s ≠ r moves both by C_s. Every reading is scored
//     against the healthy ladder and against each single stuck rung by its
//     likelihood under a probit transition, integrated over what the
//     station cannot know: the levels' calibration errors relative to the
//     trip's level (CalPF·√(rungs not shared), normal) and the reference's
//     allowed deviation, and maximised over the transition's σ. A stuck
//     rung is named only when it explains the readings DecideNats better
//     than the healthy ladder; until one side wins, the pairs that tell
//     them apart are re-probed with twice the samples (at most MaxK).
//   - Deviation: the trip is compared with the allowance; when it lies
//     within 3 standard errors of it, further searches are pooled (at most
//     MaxSearches). CombineChecks names the drifted rung (or the group the
//     reference units cannot tell apart) from every reference's deviation.
//
// The station is left with power off and every rung open. An error means
// the station could not finish (pin error, lid): no verdict.
func CheckReference(ctx context.Context, st Station, clk Clock, ref Reference, cfg CheckConfig) (res RefCheck, err error) {
	cfg = cfg.withDefaults()
	res.Reference = ref
	n := len(cfg.RungsPF)
	if n == 0 || n > 16 {
		return res, fmt.Errorf("reference check: ladder has %d rungs, want 1 to 16", n)
	}
	start := clk.Now()
	defer func() {
		if herr := st.Halt(); herr != nil && err == nil {
			err = fmt.Errorf("reference check: halt: %w", herr)
		}
		res.FixtureTime = clk.Now().Sub(start)
	}()
	c := &checker{ctx: ctx, st: st, cfg: cfg}
	for p := range 1 << n {
		c.all = append(c.all, Level{PF: c.pf(uint16(p)), Pattern: uint16(p)})
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
	res.PairSamples += 2 * cfg.K
	if top := c.pf(allClosed); highAll == 0 && top > T+2 {
		fault("pad or latch pogo pin open: the latch never read high, not even with every rung closed (%.1f pF)", top)
		return res, nil
	}

	// The reference trip on the whole ladder.
	first, err := c.tripNear(T)
	if err != nil {
		return res, err
	}
	res.Searches++
	sigma := 0.25 // no transition measured: a typical one
	center, uT := T, math.Max(ref.AllowedDevPF/2, 0.05)
	if first.Found && !first.Below && !math.IsNaN(first.TripPF) {
		if sp := first.SpreadPF; sp > 0 && !math.IsInf(sp, 0) {
			res.SpreadPF = ptrF(sp)
			sigma = first.SigmaPF
		}
		// The pairs are judged against this session's trip when it lies
		// within 1 pF (or the allowance) of the registered one: a drifted
		// rung under every level near the trip moves the trip, not the
		// pairs' places around it, and a stuck small rung moves it by less
		// than its value toward where the pair still tells. A trip further
		// off is a stuck rung the search followed: the registered trip
		// (within its allowance) is the better centre then.
		if math.Abs(first.TripPF-T) <= math.Max(ref.AllowedDevPF, 1) {
			center, uT = first.TripPF, math.Max(2*first.SEPF, 0.03)
		}
	}
	sigma = math.Min(math.Max(sigma, 0.1), 1.5)

	// Rung pairs, scored against the healthy ladder and each stuck rung.
	pt := c.nearest(center)
	rd := []reading{
		{lo: 0, nlo: cfg.K, hlo: lowAll, rung: -1},
		{lo: allClosed, nlo: cfg.K, hlo: highAll, rung: -1},
	}
	for r := range n {
		q := c.straddle(r, center)
		k := cfg.K
		m := math.Min(center-c.pf(q), c.pf(q)+cfg.RungsPF[r]-center)
		if m < 4*sigma+3*c.u(q, pt, uT) {
			k = max(k, 32)
		}
		x := reading{lo: q, hi: q | 1<<r, pair: true, rung: r}
		if err := c.sample(&x, k); err != nil {
			return res, err
		}
		res.PairSamples += 2 * k
		rd = append(rd, x)
	}
	var sc scores
	for {
		sc = c.score(rd, center, uT, pt)
		best, llr := sc.bestFault()
		if llr >= cfg.DecideNats || llr <= -cfg.AcceptNats {
			break
		}
		// Re-probe the pairs whose readings the best fault and the healthy
		// ladder predict differently and that are not yet decisive.
		more := false
		for i := range rd {
			x := &rd[i]
			if x.nlo >= cfg.MaxK || sc.per[best][i]-sc.per[0][i] <= -cfg.AcceptNats || !c.differs(*x, best, center, sigma) {
				continue
			}
			k := min(x.nlo, cfg.MaxK-x.nlo)
			if err := c.sample(x, k); err != nil {
				return res, err
			}
			res.PairSamples += k
			if x.pair {
				res.PairSamples += k
			}
			more = true
		}
		if !more {
			break
		}
	}
	best, llr := sc.bestFault()
	res.StuckLLR = llr
	for _, x := range rd {
		if !x.pair {
			continue
		}
		f := &res.Rungs[x.rung]
		f.Test = fmt.Sprintf("%s (trip %.2f pF)", c.describeReading(x), center)
		if sc.llrOf(c.hyp(x.rung, false)) <= -cfg.AcceptNats && sc.llrOf(c.hyp(x.rung, true)) <= -cfg.AcceptNats {
			f.Status = RungOK
		}
	}
	if llr >= cfg.DecideNats {
		res.StuckFound = true
		for r := range res.Rungs {
			if res.Rungs[r].Status == RungOK {
				res.Rungs[r].Status = RungUnmeasured
			}
		}
		// Every stuck rung that fits about as well is named with it.
		var alts []string
		for h := 1; h < len(sc.total); h++ {
			if sc.total[h] < sc.total[best]-math.Log(100) {
				continue
			}
			r, closed := c.hypRung(h)
			status, word := RungStuckOpen, "open"
			if closed {
				status, word = RungStuckClosed, "closed"
			}
			res.Rungs[r].Status = status
			alts = append(alts, fmt.Sprintf("rung %d (%.2f pF) stuck %s", r, cfg.RungsPF[r], word))
		}
		switch {
		case sc.poor[best] >= 0:
			fault("the pair readings fit no single stuck rung (nearest: %s; worst: %s): several ladder faults, or the reference unit is not the registered one", joinList(alts), c.describeReading(rd[sc.poor[best]]))
		case len(alts) == 1:
			fault("%s", alts[0])
		default:
			fault("%s (this reference unit cannot tell them apart)", joinList(alts))
		}
		return res, nil
	}
	if i := sc.poor[0]; i >= 0 {
		cause := "several ladder faults, or an intermittent or damaged reference unit"
		if x := rd[i]; x.pair {
			cause = fmt.Sprintf("rung %d (%.2f pF) far from its entered value (its pair reads another step), %s", x.rung, cfg.RungsPF[x.rung], cause)
			res.Rungs[x.rung].Status = RungDriftSuspect
		}
		fault("reference unit %s: the pair readings fit neither a healthy ladder nor a single stuck rung (worst: %s): %s", ref.Serial, c.describeReading(rd[i]), cause)
		return res, nil
	}

	// Deviation: pool further searches while it is too close to call.
	trips := []search{first}
	if !first.Found || first.Below || math.IsNaN(first.TripPF) {
		fault("reference unit %s: no trip point found near the registered %.2f pF", ref.Serial, T)
		return res, nil
	}
	var mean, se float64
	for {
		var sum, ss float64
		for _, t := range trips {
			sum += t.TripPF
			s := math.Max(2*t.SEPF, 0.02)
			ss += s * s
		}
		k := float64(len(trips))
		mean, se = sum/k, math.Sqrt(ss)/k
		d := math.Abs(mean - T)
		if len(trips) >= cfg.MaxSearches || d <= ref.AllowedDevPF-3*se || d >= ref.AllowedDevPF+3*se {
			break
		}
		t, err := c.tripNear(T)
		if err != nil {
			return res, err
		}
		res.Searches++
		if t.Found && !t.Below && !math.IsNaN(t.TripPF) {
			trips = append(trips, t)
		} else {
			break
		}
	}
	res.MeasuredPF, res.SEPF, res.DevPF = ptrF(mean), ptrF(se), ptrF(mean-T)
	res.RungWeights = c.weights(trips)
	if math.Abs(mean-T) > ref.AllowedDevPF {
		fault("reference unit %s: trip %.2f pF, registered %.2f pF: deviation %+.2f pF beyond ±%.2f pF",
			ref.Serial, mean, T, mean-T, ref.AllowedDevPF)
		var heavy []int
		for r, w := range res.RungWeights {
			if w >= 0.5 {
				heavy = append(heavy, r)
			}
		}
		res.Suspects = "drift of " + describeRungs(cfg.RungsPF, heavy, true) + " (closed at the levels this trip rests on), or of the reference unit itself"
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

// nearest is the pattern whose level is nearest T.
func (c *checker) nearest(T float64) uint16 {
	i := sort.Search(len(c.all), func(i int) bool { return c.all[i].PF >= T })
	switch {
	case i == len(c.all):
		return c.all[i-1].Pattern
	case i > 0 && T-c.all[i-1].PF < c.all[i].PF-T:
		return c.all[i-1].Pattern
	}
	return c.all[i].Pattern
}

// u is the standard uncertainty of level p's offset from the trip: the
// calibration errors of the rungs p does not share with the trip's level pt,
// and uT, the trip's own.
func (c *checker) u(p, pt uint16, uT float64) float64 {
	d := float64(bits.OnesCount16(p ^ pt))
	return math.Sqrt(c.cfg.CalPF*c.cfg.CalPF*d + uT*uT)
}

// straddle finds the pattern q without rung r whose pair (q, q + r) best
// straddles T: it maximises min(T − q, q + r − T), fewest rungs on ties.
func (c *checker) straddle(r int, T float64) uint16 {
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
	return best
}

// reading is what was read at one level (a pogo level) or at a rung's pair
// of levels lo = q and hi = q + rung.
type reading struct {
	lo, hi   uint16
	pair     bool
	rung     int
	nlo, hlo int
	nhi, hhi int
}

// describeReading says what a reading read.
func (c *checker) describeReading(x reading) string {
	if !x.pair {
		return fmt.Sprintf("%.2f pF: %d of %d high", c.pf(x.lo), x.hlo, x.nlo)
	}
	return fmt.Sprintf("rung %d pair %.2f → %.2f pF: %d of %d and %d of %d high", x.rung, c.pf(x.lo), c.pf(x.hi), x.hlo, x.nlo, x.hhi, x.nhi)
}

// sample takes k more samples at the reading's level(s).
func (c *checker) sample(x *reading, k int) error {
	h, err := c.highs(x.lo, k)
	if err != nil {
		return err
	}
	x.nlo, x.hlo = x.nlo+k, x.hlo+h
	if !x.pair {
		return nil
	}
	if h, err = c.highs(x.hi, k); err != nil {
		return err
	}
	x.nhi, x.hhi = x.nhi+k, x.hhi+h
	return nil
}

// Hypotheses: 0 is the healthy ladder, 1 + r rung r stuck open, 1 + n + r
// rung r stuck closed.
func (c *checker) hyp(r int, closed bool) int {
	if closed {
		return 1 + len(c.cfg.RungsPF) + r
	}
	return 1 + r
}

func (c *checker) hypRung(h int) (int, bool) {
	n := len(c.cfg.RungsPF)
	if h > n {
		return h - 1 - n, true
	}
	return h - 1, false
}

// effPF is the capacitance pattern p puts on the pad under hypothesis h, on
// the entered values.
func (c *checker) effPF(h int, p uint16) float64 {
	if h > 0 {
		r, closed := c.hypRung(h)
		if closed {
			p |= 1 << r
		} else {
			p &^= 1 << r
		}
	}
	return c.pf(p)
}

// differs reports whether hypothesis h and the healthy ladder put one of the
// reading's levels on different sides of the trip, or the pair's two levels
// at different distances apart.
func (c *checker) differs(x reading, h int, T, sigma float64) bool {
	side := func(p uint16) bool {
		a, b := (c.effPF(0, p)-T)/sigma, (c.effPF(h, p)-T)/sigma
		return math.Abs(normCDF(a)-normCDF(b)) > 0.02
	}
	if side(x.lo) || x.pair && side(x.hi) {
		return true
	}
	return x.pair && math.Abs((c.effPF(0, x.hi)-c.effPF(0, x.lo))-(c.effPF(h, x.hi)-c.effPF(h, x.lo))) > 1e-9
}

// llKey identifies one reading likelihood: reading, its counts (the upper
// level has as many samples as the lower), σ, and where the hypothesis puts
// its levels.
type llKey struct {
	i, n, hlo, hhi int
	sigma, a0, d   float64
}

// scores are the log likelihoods of the readings per hypothesis.
type scores struct {
	total []float64   // per hypothesis, profiled over σ
	per   [][]float64 // per hypothesis and reading, at that hypothesis' σ
	poor  []int       // a reading the hypothesis fits very badly, or −1
}

// bestFault returns the best stuck-rung hypothesis and its log likelihood
// ratio against the healthy ladder.
func (s scores) bestFault() (int, float64) {
	best := 1
	for h := 2; h < len(s.total); h++ {
		if s.total[h] > s.total[best] {
			best = h
		}
	}
	return best, s.total[best] - s.total[0]
}

func (s scores) llrOf(h int) float64 { return s.total[h] - s.total[0] }

// lapse is the chance of a sample reading the wrong way whatever the
// capacitance (a glitch): one wrong sample must not outweigh everything.
const lapse = 1e-4

// poorNats is the misfit of one reading (log likelihood below its
// saturated value) taken as "this hypothesis cannot explain it".
const poorNats = 30.0

// score computes the log likelihood of every hypothesis. A reading's
// likelihood integrates its level's unknown offset a ~ N(effPF − T, u²)
// over P(high) = Φ(a/σ) (the pair's upper level at a + effPF(hi) −
// effPF(lo), with the rung's own calibration error folded into its σ); σ is
// profiled over a grid around the measured one.
func (c *checker) score(rd []reading, T, uT float64, pt uint16) scores {
	nh := 1 + 2*len(c.cfg.RungsPF)
	s := scores{total: make([]float64, nh), per: make([][]float64, nh), poor: make([]int, nh)}
	// Many hypotheses put a reading's levels at the same places, and a
	// re-probe changes few readings: memoise across calls.
	if c.memo == nil {
		c.memo = map[llKey]float64{}
	}
	memo := c.memo
	for h := range nh {
		best := math.Inf(-1)
		var bestPer []float64
		for _, f := range sigmaGrid {
			sigma := f
			per := make([]float64, len(rd))
			var tot float64
			for i, x := range rd {
				a0 := c.effPF(h, x.lo) - T
				var d float64
				if x.pair {
					d = c.effPF(h, x.hi) - c.effPF(h, x.lo)
				}
				k := llKey{i, x.nlo, x.hlo, x.hhi, f, a0, d}
				ll, ok := memo[k]
				if !ok {
					ll = c.readingLL(x, a0, d, c.u(x.lo, pt, uT), sigma)
					memo[k] = ll
				}
				per[i] = ll
				tot += ll
			}
			if tot > best {
				best, bestPer = tot, per
			}
		}
		s.total[h], s.per[h], s.poor[h] = best, bestPer, -1
		worst := float64(poorNats)
		for i, x := range rd {
			if m := satLL(x) - bestPer[i]; m > worst {
				s.poor[h], worst = i, m
			}
		}
	}
	return s
}

// sigmaGrid are the transition σ (pF) over which the likelihood is
// profiled, in steps of √2: the first search's σ is too rough to fix it
// (it ranges over a factor of 4 for one unit when the trip falls between
// widely spaced levels), and the pair readings measure it themselves.
var sigmaGrid = []float64{0.113, 0.16, 0.226, 0.32, 0.45, 0.64, 0.9, 1.28}

// satLL is a reading's log likelihood at its own observed fractions.
func satLL(x reading) float64 {
	ll := func(h, n int) float64 {
		if n == 0 {
			return 0
		}
		p := math.Min(math.Max(float64(h)/float64(n), lapse), 1-lapse)
		return float64(h)*math.Log(p) + float64(n-h)*math.Log(1-p)
	}
	return ll(x.hlo, x.nlo) + ll(x.hhi, x.nhi)
}

// readingLL is the log likelihood of reading x when its lower level sits
// a0 ± u from the trip and its upper level d above the lower.
func (c *checker) readingLL(x reading, a0, d, u, sigma float64) float64 {
	sigHi := sigma
	if d != 0 {
		sigHi = math.Hypot(sigma, c.cfg.CalPF)
	}
	logP := func(z float64, hi, n int) float64 {
		p := lapse + (1-2*lapse)*normCDF(z)
		return float64(hi)*math.Log(p) + float64(n-hi)*math.Log(1-p)
	}
	// Levels beyond 9σ of the trip for every offset read with the lapse
	// rate alone: no integral needed (Φ(−9) ≈ 1e-19 ≪ lapse).
	far := func(a float64) (bool, float64) {
		switch {
		case a-5*u > 9*sigHi:
			return true, 9
		case a+5*u < -9*sigHi:
			return true, -9
		}
		return false, 0
	}
	if f1, z1 := far(a0); f1 {
		if !x.pair {
			return logP(z1, x.hlo, x.nlo)
		}
		if f2, z2 := far(a0 + d); f2 {
			return logP(z1, x.hlo, x.nlo) + logP(z2, x.hhi, x.nhi)
		}
	}
	// ∫ N(e) L(a0 + e·u) de over e ∈ [−5, 5] by the trapezoid rule in
	// log space: a coarse grid, refined 16-fold on the two intervals around
	// its largest point, where a reading of many samples makes the
	// integrand much narrower than the coarse step.
	g := func(e float64) float64 {
		a := a0 + e*u
		t := logP(a/sigma, x.hlo, x.nlo) - e*e/2
		if x.pair {
			t += logP((a+d)/sigHi, x.hhi, x.nhi)
		}
		return t
	}
	const n, fine = 25, 16
	h := 10.0 / (n - 1)
	var coarse [n]float64
	jm := 0
	for j := range n {
		coarse[j] = g(-5 + h*float64(j))
		if coarse[j] > coarse[jm] {
			jm = j
		}
	}
	lo, hi := max(jm-1, 0), min(jm+1, n-1)
	terms := make([]float64, 0, 2*(n+2*fine))
	add := func(t, w float64) { terms = append(terms, t+math.Log(w)) }
	for j := range n - 1 { // coarse intervals [j, j+1] outside [lo, hi]
		if j >= lo && j < hi {
			continue
		}
		add(coarse[j], h/2)
		add(coarse[j+1], h/2)
	}
	hf := h / fine
	prev := coarse[lo]
	for k := 1; k <= (hi-lo)*fine; k++ {
		next := g(-5 + h*float64(lo) + hf*float64(k))
		add(prev, hf/2)
		add(next, hf/2)
		prev = next
	}
	mx := math.Inf(-1)
	for _, t := range terms {
		mx = math.Max(mx, t)
	}
	var sum float64
	for _, t := range terms {
		sum += math.Exp(t - mx)
	}
	return mx + math.Log(sum) - 0.5*math.Log(2*math.Pi)
}

// search is one trip search and the pattern and entered pF of each of its
// levels.
type search struct {
	TripResult
	pats []uint16
	pfs  []float64
}

// weights returns, per rung, how much of a drift of that rung the measured
// trip takes up: the share of the Fisher information one sample would give
// on the search's levels with the rung closed, at the mean fitted trip and
// σ (at least 0.15 pF) of the pooled searches. The information of the
// levels the trip rests on dominates, so this follows the refinement's
// choice of levels without its randomness.
func (c *checker) weights(trips []search) []float64 {
	w := make([]float64, len(c.cfg.RungsPF))
	var mu, sig float64
	for _, t := range trips {
		mu += t.TripPF / float64(len(trips))
		sig += math.Max(t.SigmaPF, 0.15) / float64(len(trips))
	}
	if math.IsNaN(sig) {
		sig = 0.25
	}
	var tot float64
	t := trips[0]
	for i, pf := range t.pfs {
		z := (pf - mu) / sig
		dens := phi(z)
		f := dens * dens / math.Max(normCDF(z)*normCDF(-z), 1e-300)
		tot += f
		for r := range w {
			if t.pats[i]&(1<<r) != 0 {
				w[r] += f
			}
		}
	}
	if tot > 0 {
		for r := range w {
			w[r] /= tot
		}
	}
	return w
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
	return strings.Join(s[:len(s)-1], ", ") + " or " + s[len(s)-1]
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

// CheckWindowPF is how far either side of a reference unit's registered trip
// point the check searches; the trip must lie at least this far inside the
// ladder's range.
const CheckWindowPF = 2.5

// tripNear searches the reference trip on the strictly ascending levels
// within CheckWindowPF of T (on equal values, the first in c.all).
func (c *checker) tripNear(T float64) (search, error) {
	var lv []Level
	for _, l := range c.all {
		if math.Abs(l.PF-T) > CheckWindowPF {
			continue
		}
		if k := len(lv); k > 0 && l.PF <= lv[k-1].PF {
			continue
		}
		lv = append(lv, l)
	}
	pf := make([]float64, len(lv))
	pats := make([]uint16, len(lv))
	for i, l := range lv {
		pf[i], pats[i] = l.PF, l.Pattern
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
		return search{TripResult: res, pats: pats, pfs: pf}, fmt.Errorf("reference check: trip search: %w", err)
	}
	return search{TripResult: res, pats: pats, pfs: pf}, nil
}

// driftHyp is one explanation of the reference deviations: a drift of one
// rung, of the stray, or of one reference unit itself, with the weight
// each reference's trip gives it.
type driftHyp struct {
	name  string
	rung  int // −1: not a rung
	a     []float64
	delta float64
	chi2  float64
	self  bool // a reference unit's own drift
}

// CombineChecks merges the checks of a station's reference units into one
// ladder verdict and one fault list. A rung's status is the worst any
// reference found. When a reference deviates beyond its allowance and no
// reference found a stuck rung, the deviations of all references are
// explained jointly by least squares: each reference i measured d_i =
// a_i·δ + noise (noise σ = a third of its allowance, or its standard error
// if larger), with a_i its RungWeights for a drift of one rung, 1 for every
// reference for a drift of the stray, and 1 for one reference and 0 for the
// others for a drift of that reference unit itself. Every explanation
// within χ² 4 of the best (and with χ² ≤ 16) is named: one rung alone is
// "drifted"; several are "drift_suspect" (these reference units cannot
// tell them apart). The drift is stated as true − entered for a rung or
// the stray, and as the trip's move for a reference unit.
func CombineChecks(refs []RefCheck) ([]RungFinding, []string) {
	var rungs []RungFinding
	rank := map[string]int{RungUnmeasured: 0, RungOK: 1, RungDriftSuspect: 2, RungDrifted: 3, RungStuckClosed: 4, RungStuckOpen: 4}
	stuck, deviates := false, false
	for _, rc := range refs {
		stuck = stuck || rc.StuckFound
		if rc.DevPF != nil && math.Abs(*rc.DevPF) > rc.AllowedDevPF {
			deviates = true
		}
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
	var faults []string
	for _, rc := range refs {
		for _, f := range rc.Faults {
			if !slices.Contains(faults, f) {
				faults = append(faults, f)
			}
		}
	}
	if stuck {
		return combineStuck(refs, rungs, faults)
	}
	if !deviates {
		return rungs, faults
	}
	// The references with a measured trip.
	var d, s []float64
	var serials []string
	var w [][]float64
	for _, rc := range refs {
		if rc.DevPF == nil || len(rc.RungWeights) == 0 {
			continue
		}
		d = append(d, *rc.DevPF)
		sd := rc.AllowedDevPF / 3
		if rc.SEPF != nil {
			sd = math.Max(sd, *rc.SEPF)
		}
		s = append(s, sd)
		serials = append(serials, rc.Serial)
		w = append(w, rc.RungWeights)
	}
	var hyps []driftHyp
	for r := range rungs {
		a := make([]float64, len(d))
		for i := range d {
			if r < len(w[i]) {
				a[i] = w[i][r]
			}
		}
		hyps = append(hyps, driftHyp{name: fmt.Sprintf("rung %d (%.2f pF)", r, rungs[r].EnteredPF), rung: r, a: a})
	}
	ones := make([]float64, len(d))
	for i := range ones {
		ones[i] = 1
	}
	hyps = append(hyps, driftHyp{name: "the stray", rung: -1, a: ones})
	for j := range d {
		a := make([]float64, len(d))
		a[j] = 1
		hyps = append(hyps, driftHyp{name: "reference unit " + serials[j] + " itself", rung: -1, a: a, self: true})
	}
	best := math.Inf(1)
	for k := range hyps {
		h := &hyps[k]
		var sad, saa float64
		for i := range d {
			sad += h.a[i] * d[i] / (s[i] * s[i])
			saa += h.a[i] * h.a[i] / (s[i] * s[i])
		}
		if saa < 1e-3 {
			h.chi2 = math.Inf(1) // this reference set does not see it
			continue
		}
		h.delta = sad / saa
		for i := range d {
			r := (d[i] - h.a[i]*h.delta) / s[i]
			h.chi2 += r * r
		}
		best = math.Min(best, h.chi2)
	}
	var names []string
	var fit []int
	var by float64
	for _, h := range hyps {
		if h.chi2 <= best+4 && h.chi2 <= 16 {
			// A rung (or the stray) larger than entered makes every trip
			// read low on the entered values: its drift is −δ.
			by = -h.delta
			if h.self {
				by = h.delta
			}
			names = append(names, fmt.Sprintf("%s by %+.2f pF", h.name, by))
			if h.rung >= 0 {
				fit = append(fit, h.rung)
			}
		}
	}
	switch {
	case len(names) == 0:
		faults = append(faults, "the reference deviations fit no single drift (of one rung, the stray or one reference unit): several causes")
	case len(names) == 1 && len(fit) == 1:
		r := fit[0]
		faults = append(faults, fmt.Sprintf("rung %d (%.2f pF) drifted by %+.2f pF (the reference deviations, taken together, point at it alone)", r, rungs[r].EnteredPF, by))
		rungs[r].Status = RungDrifted
	case len(names) == 1:
		faults = append(faults, fmt.Sprintf("drift of %s (the reference deviations, taken together, point at it alone)", names[0]))
	default:
		faults = append(faults, fmt.Sprintf("drift of %s (these reference units cannot tell them apart)", joinList(names)))
		for _, r := range fit {
			if rank[RungDriftSuspect] > rank[rungs[r].Status] {
				rungs[r].Status = RungDriftSuspect
			}
		}
	}
	return rungs, faults
}

// combineStuck narrows the stuck rungs the references named to those every
// reference that found one allows and none found working, and says so in
// one more fault line.
func combineStuck(refs []RefCheck, rungs []RungFinding, faults []string) ([]RungFinding, []string) {
	type stuck struct {
		rung   int
		status string
	}
	var inter []stuck
	first := true
	ok := map[int]bool{}
	for _, rc := range refs {
		for _, f := range rc.Rungs {
			if f.Status == RungOK {
				ok[f.Rung] = true
			}
		}
		if !rc.StuckFound {
			continue
		}
		var named []stuck
		for _, f := range rc.Rungs {
			if f.Status == RungStuckOpen || f.Status == RungStuckClosed {
				named = append(named, stuck{f.Rung, f.Status})
			}
		}
		if first {
			inter, first = named, false
			continue
		}
		inter = slices.DeleteFunc(inter, func(s stuck) bool { return !slices.Contains(named, s) })
	}
	inter = slices.DeleteFunc(inter, func(s stuck) bool { return ok[s.rung] })
	if len(inter) == 0 {
		// The references may agree on the rung but not on open or closed
		// (a small rung's fault moves the trip onto the side where the two
		// read alike).
		var common []int
		first := true
		for _, rc := range refs {
			if !rc.StuckFound {
				continue
			}
			var named []int
			for _, f := range rc.Rungs {
				if f.Status == RungStuckOpen || f.Status == RungStuckClosed {
					named = append(named, f.Rung)
				}
			}
			if first {
				common, first = named, false
				continue
			}
			common = slices.DeleteFunc(common, func(r int) bool { return !slices.Contains(named, r) })
		}
		common = slices.DeleteFunc(common, func(r int) bool { return ok[r] })
		if len(common) == 1 {
			r := common[0]
			faults = append(faults, fmt.Sprintf("ladder: rung %d (%.2f pF) stuck, open or closed (the one rung every reference unit's readings allow; they differ on which way)", r, rungs[r].EnteredPF))
		}
		return rungs, faults
	}
	var names []string
	for i := range rungs {
		if g := &rungs[i]; g.Status == RungStuckOpen || g.Status == RungStuckClosed {
			g.Status = RungUnmeasured
			if ok[i] {
				g.Status = RungOK
			}
		}
	}
	for _, s := range inter {
		rungs[s.rung].Status = s.status
		word := "open"
		if s.status == RungStuckClosed {
			word = "closed"
		}
		names = append(names, fmt.Sprintf("rung %d (%.2f pF) stuck %s", s.rung, rungs[s.rung].EnteredPF, word))
	}
	line := "ladder: " + names[0] + " (the one stuck rung every reference unit's readings allow)"
	if len(names) > 1 {
		line = "ladder: " + joinList(names) + " (these reference units cannot tell them apart)"
	}
	return rungs, append(faults, line)
}
