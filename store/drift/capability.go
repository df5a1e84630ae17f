package drift

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"
)

// Capability holds process capability against a pair of limits
// (NIST/SEMATECH e-Handbook §6.1.6): Cp = (USL−LSL)/6σ,
// Cpk = min(USL−μ, μ−LSL)/3σ with σ within subgroups; Pp and Ppk the same
// with the overall sample standard deviation. With one limit missing
// (NaN) Cp and Pp are NaN and Cpk, Ppk use the limit present.
type Capability struct {
	N            int
	Low, High    float64 // limits the indices are against (NaN = none)
	Mean         float64
	SigmaWithin  float64
	SigmaOverall float64
	Method       string // how SigmaWithin was found: "MR̄/d2", "R̄/d2" or "s̄/c4"
	Cp, Cpk      float64
	Pp, Ppk      float64
}

// Indices returns Cp and Cpk for a process with the given mean and σ
// against low and high (either may be NaN for a one-sided limit).
func Indices(mean, sigma, low, high float64) (cp, cpk float64) {
	cp = (high - low) / (6 * sigma)
	up := (high - mean) / (3 * sigma)
	dn := (mean - low) / (3 * sigma)
	switch {
	case math.IsNaN(low):
		cpk = up
	case math.IsNaN(high):
		cpk = dn
	default:
		cpk = math.Min(up, dn)
	}
	return cp, cpk
}

// CapabilityOf computes capability of x against low and high. subgroup is
// the rational subgroup size for the within-subgroup σ: 1 means individuals
// (MR̄/d2), 2…10 means consecutive subgroups with R̄/d2, or s̄/c4 when
// useS is set. Sigma overall is the sample standard deviation of all of x.
func CapabilityOf(x []float64, subgroup int, useS bool, low, high float64) (Capability, error) {
	if math.IsNaN(low) && math.IsNaN(high) {
		return Capability{}, fmt.Errorf("capability: no limits: %w", ErrParam)
	}
	if !math.IsNaN(low) && !math.IsNaN(high) && !(high > low) {
		return Capability{}, fmt.Errorf("capability: limits %g … %g: %w", low, high, ErrParam)
	}
	// σ within is the chart's σ over the whole series as the baseline,
	// estimated as the chart functions do, without building the charts.
	all := FirstN(len(x))
	var (
		e   estimate
		err error
	)
	switch {
	case subgroup <= 1:
		e, err = estimateIndividuals(x, all, Options{})
		if err != nil {
			err = fmt.Errorf("individuals chart: %w", err)
		}
	case useS:
		if e, _, err = estimateXbar(x, subgroup, all, Options{}, StdDev); err != nil {
			err = fmt.Errorf("x̄-%s chart: %w", StdDev, err)
		}
	default:
		if e, _, err = estimateXbar(x, subgroup, all, Options{}, Range); err != nil {
			err = fmt.Errorf("x̄-%s chart: %w", Range, err)
		}
	}
	if err != nil {
		return Capability{}, fmt.Errorf("capability: %w", err)
	}
	c := Capability{N: len(x), Low: low, High: high, Mean: stat.Mean(x, nil),
		SigmaWithin: e.sigma, SigmaOverall: stat.StdDev(x, nil)}
	switch {
	case subgroup <= 1:
		c.Method = "MR̄/d2"
	case useS:
		c.Method = "s̄/c4"
	default:
		c.Method = "R̄/d2"
	}
	c.Cp, c.Cpk = Indices(c.Mean, c.SigmaWithin, low, high)
	c.Pp, c.Ppk = Indices(c.Mean, c.SigmaOverall, low, high)
	return c, nil
}

// Tail chooses a two-sided interval or a one-sided bound.
type Tail int

// Tails for ClopperPearson.
const (
	TwoSided  Tail = iota // both bounds at (1−conf)/2 each
	UpperOnly             // upper bound at 1−conf; lower is 0
	LowerOnly             // lower bound at 1−conf; upper is 1
)

// ClopperPearson is the exact binomial confidence interval for x events in
// n trials (Clopper & Pearson, Biometrika 26:404–413, 1934):
// lower = Beta⁻¹(α; x, n−x+1), upper = Beta⁻¹(1−α; x+1, n−x), with
// α = (1−conf)/2 for TwoSided and 1−conf for one side.
func ClopperPearson(x, n int, conf float64, tail Tail) (lo, hi float64, err error) {
	if n <= 0 || x < 0 || x > n || !(conf > 0 && conf < 1) {
		return math.NaN(), math.NaN(), fmt.Errorf("clopper-pearson %d of %d at %g: %w", x, n, conf, ErrParam)
	}
	a := 1 - conf
	if tail == TwoSided {
		a /= 2
	}
	lo, hi = 0, 1
	if x > 0 && tail != UpperOnly {
		lo = distuv.Beta{Alpha: float64(x), Beta: float64(n - x + 1)}.Quantile(a)
	}
	if x < n && tail != LowerOnly {
		hi = distuv.Beta{Alpha: float64(x + 1), Beta: float64(n - x)}.Quantile(1 - a)
	}
	return lo, hi, nil
}

// Yield is first-pass yield with its exact confidence interval.
type Yield struct {
	Pass, Total int
	Rate        float64 // Pass/Total
	Low, High   float64 // two-sided Clopper–Pearson bounds at Confidence
	Confidence  float64
}

// FirstPassYield is pass of total units passing at the first attempt, with
// a two-sided exact interval at conf (e.g. 0.95).
func FirstPassYield(pass, total int, conf float64) (Yield, error) {
	lo, hi, err := ClopperPearson(pass, total, conf, TwoSided)
	if err != nil {
		return Yield{}, fmt.Errorf("first-pass yield: %w", err)
	}
	return Yield{Pass: pass, Total: total, Rate: float64(pass) / float64(total), Low: lo, High: hi, Confidence: conf}, nil
}
