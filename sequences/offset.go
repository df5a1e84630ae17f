package sequences

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// ---------------------------------------------------------------------------
// Fixture offset: the fixture's calibration error, from reference units

// ErrNoOffset is returned by OffsetFromChecks when no reference unit of the
// check has a lab trip point and a measured trip: the fixture's offset
// cannot be estimated.
var ErrNoOffset = errors.New("sequences: no reference unit with a lab trip point was measured")

// DefaultStrayPriorPF is the prior standard deviation of the fixture's
// stray error (true − entered) when the station states none: deliberately
// wide, three times the 0.1 pF of a stray measured at the pad through pogo
// pins (DEVELOPERS.md "Simulator realism floor"), so that the reference
// units, not the prior, set the offset (at a reference uncertainty of
// 0.05 pF the prior keeps 0.03 % of the estimate's weight).
const DefaultStrayPriorPF = 0.3

// OffsetRef is one reference unit's evidence about the fixture offset: its
// lab trip point (traceable capacitance at the pad), the trip this check
// measured in the ladder's entered basis, the standard uncertainty of their
// difference, and the rung weights of the measured trip (RefCheck.
// RungWeights: the share of the search's information on levels with each
// rung closed).
type OffsetRef struct {
	Serial     string    `json:"serial"`
	LabTripPF  float64   `json:"lab_trip_pf"`
	MeasuredPF float64   `json:"measured_pf"`
	UPF        float64   `json:"u_pf"`
	Weights    []float64 `json:"rung_weights"`
}

// FixtureOffset is what a trip point found on this fixture's ladder lacks
// of the true external capacitance at the pad, estimated from the reference
// units of the shift-start check.
//
// Model: a level's true capacitance is its entered value plus δ_s + Σ_r δ_r
// over the rungs it closes, δ_s the stray's error and δ_r rung r's (true −
// entered). A trip found on levels that close rung r with weight w_r is
// therefore low by o(w) = δ_s + Σ_r δ_r·w_r. Reference i, lab trip L_i,
// measured at M_i, gives d_i = L_i − M_i = o(w_i) + e_i, e_i ~ N(0, u_i²)
// (its search's standard error and the lab's, in quadrature). With the
// priors δ_s ~ N(0, StrayPriorPF²) and δ_r ~ N(0, CalPF²), independent, o
// is a Gaussian process with covariance k(w, w') = StrayPriorPF² + CalPF²·
// w·w', and the offset at w is its conditional mean and standard deviation
// given d: ô(w) = k(w)ᵀ(K + N)⁻¹d, u²(w) = k(w, w) − k(w)ᵀ(K + N)⁻¹k(w),
// K_ij = k(w_i, w_j), N = diag(u_i²) (the conditional of a joint normal:
// C. E. Rasmussen & C. K. I. Williams, Gaussian Processes for Machine
// Learning, MIT Press 2006, eqs. 2.23–2.24). A trip whose levels share the
// references' rungs gets their offset and its uncertainty; a rung no
// reference closes keeps its prior CalPF.
type FixtureOffset struct {
	StrayPriorPF float64     `json:"stray_prior_pf"`
	CalPF        float64     `json:"cal_pf"`
	Refs         []OffsetRef `json:"refs"`
}

// OffsetFromChecks estimates the offset from a check's reference results:
// every reference with a lab trip point (Reference.LabTripPF > 0) whose trip
// was measured and that named no stuck rung. strayPriorPF ≤ 0 takes
// DefaultStrayPriorPF; calPF is one rung's calibration standard uncertainty.
func OffsetFromChecks(checks []RefCheck, strayPriorPF, calPF float64) (*FixtureOffset, error) {
	if strayPriorPF <= 0 {
		strayPriorPF = DefaultStrayPriorPF
	}
	o := &FixtureOffset{StrayPriorPF: strayPriorPF, CalPF: calPF}
	for _, c := range checks {
		if !(c.LabTripPF > 0) || c.MeasuredPF == nil || c.SEPF == nil || c.StuckFound || len(c.RungWeights) == 0 {
			continue
		}
		u := math.Hypot(*c.SEPF, c.LabUPF)
		o.Refs = append(o.Refs, OffsetRef{Serial: c.Serial, LabTripPF: c.LabTripPF, MeasuredPF: *c.MeasuredPF, UPF: u,
			Weights: append([]float64(nil), c.RungWeights...)})
	}
	if len(o.Refs) == 0 {
		return nil, ErrNoOffset
	}
	if _, _, err := o.At(o.Refs[0].Weights); err != nil {
		return nil, err
	}
	return o, nil
}

// k is the prior covariance of the offsets at rung weights a and b.
func (o *FixtureOffset) k(a, b []float64) float64 {
	var dot float64
	for r := range min(len(a), len(b)) {
		dot += a[r] * b[r]
	}
	return o.StrayPriorPF*o.StrayPriorPF + o.CalPF*o.CalPF*dot
}

// At returns the offset to add to a trip point found with rung weights w
// (TripRungWeights) and its standard uncertainty.
func (o *FixtureOffset) At(w []float64) (pf, u float64, err error) {
	n := len(o.Refs)
	if n == 0 {
		return 0, 0, ErrNoOffset
	}
	a := mat.NewSymDense(n, nil)
	d := mat.NewVecDense(n, nil)
	kw := mat.NewVecDense(n, nil)
	for i, ri := range o.Refs {
		if !(ri.UPF > 0) {
			return 0, 0, fmt.Errorf("reference unit %s: uncertainty %g pF: %w", ri.Serial, ri.UPF, ErrNoOffset)
		}
		for j := i; j < n; j++ {
			v := o.k(ri.Weights, o.Refs[j].Weights)
			if j == i {
				v += ri.UPF * ri.UPF
			}
			a.SetSym(i, j, v)
		}
		d.SetVec(i, ri.LabTripPF-ri.MeasuredPF)
		kw.SetVec(i, o.k(w, ri.Weights))
	}
	var ch mat.Cholesky
	if !ch.Factorize(a) {
		return 0, 0, fmt.Errorf("reference covariance not positive definite: %w", ErrNoOffset)
	}
	var alpha, beta mat.VecDense
	if err := ch.SolveVecTo(&alpha, d); err != nil {
		return 0, 0, err
	}
	if err := ch.SolveVecTo(&beta, kw); err != nil {
		return 0, 0, err
	}
	pf = mat.Dot(kw, &alpha)
	v := o.k(w, w) - mat.Dot(kw, &beta)
	return pf, math.Sqrt(math.Max(v, 0)), nil
}

// TripRungWeights is, for a trip point mu with transition σ found on the
// level set, each rung's share of the Fisher information one sample gives
// on the levels that close it (ProbitWeight at σ, at least 0.15 pF as the
// reference check takes it): how much of rung r's calibration error the
// trip takes up. rungs is the ladder's rung count.
func TripRungWeights(levels []Level, rungs int, mu, sigma float64) []float64 {
	w := make([]float64, rungs)
	if !(sigma >= 0.15) {
		sigma = 0.15
	}
	var tot float64
	for _, l := range levels {
		z := (l.PF - mu) / sigma
		if math.Abs(z) > 8 {
			continue
		}
		f := ProbitWeight(z)
		tot += f
		for r := range w {
			if l.Pattern&(1<<r) != 0 {
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
