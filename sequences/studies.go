package sequences

import (
	"errors"
	"fmt"
	"math"
	"slices"
)

// Gauge studies of station trust: the type-1 and the gauge R&R study. Pure
// functions over readings; the reference check is in refcheck.go, the
// ladder self-test in selftest.go, the uncertainty budget in budget.go.

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
// : K1 by trials, K2 by appraisers, K3 by parts.
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
//
// Length: it is one pass down the AIAG worksheet (ranges, averages, EV,
// AV, GRR, PV, TV, ndc) in the worksheet's order, so a reader can check it
// line by line against the manual; splitting it would scatter that order.
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
