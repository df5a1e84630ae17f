package drift

import (
	"fmt"
	"math"
)

// ewmaState is the EWMA recursion z_t = λ·x_t + (1−λ)·z_{t−1}, z_0 = target,
// with the exact limits target ± L·σ·√(λ/(2−λ)·(1−(1−λ)^(2t)))
// (NIST/SEMATECH e-Handbook §6.3.2.4). It signals when z leaves the limits,
// once per excursion.
type ewmaState struct {
	target, sigma, lambda, l float64
	z, decay                 float64 // decay = (1−λ)^(2t)
	out                      int
}

func newEWMA(target, sigma float64, o Options) (*ewmaState, error) {
	lambda, l := o.Lambda, o.L
	if lambda == 0 {
		lambda = DefaultLambda
	}
	if l == 0 {
		l = DefaultL
	}
	if !(lambda > 0 && lambda <= 1) || !(l > 0) {
		return nil, fmt.Errorf("ewma λ = %g, L = %g: %w", lambda, l, ErrParam)
	}
	return &ewmaState{target: target, sigma: sigma, lambda: lambda, l: l, z: target, decay: 1}, nil
}

// add takes the next value; side is ±1 when the statistic has just left
// the limits, 0 otherwise.
func (s *ewmaState) add(x float64) (z, lo, hi float64, side int) {
	s.z = s.lambda*x + (1-s.lambda)*s.z
	s.decay *= (1 - s.lambda) * (1 - s.lambda)
	half := s.l * s.sigma * math.Sqrt(s.lambda/(2-s.lambda)*(1-s.decay))
	lo, hi = s.target-half, s.target+half
	now := 0
	if s.z > hi {
		now = 1
	} else if s.z < lo {
		now = -1
	}
	if now != 0 && now != s.out {
		side = now
	}
	s.out = now
	return s.z, lo, hi, side
}

// cusumState is the tabular CUSUM C⁺_i = max(0, x_i − μ0 − K + C⁺_{i−1}),
// C⁻_i = max(0, μ0 − K − x_i + C⁻_{i−1}), K = k·σ, H = h·σ (Montgomery,
// Introduction to SQC, §9.1; NIST/SEMATECH §6.3.2.3). N⁺ and N⁻ count the
// consecutive points with a sum above zero. A side signals when its sum
// crosses above H, once per excursion; the sums are not reset.
type cusumState struct {
	target, sigma, k, h float64
	cp, cm              float64
	np, nm              int
	outP, outM          bool
}

func newCUSUM(target, sigma float64, o Options) (*cusumState, error) {
	k, h := o.K, o.H
	if k == 0 {
		k = DefaultK
	}
	if h == 0 {
		h = DefaultH
	}
	if !(k >= 0) || !(h > 0) || !(o.HeadStart >= 0 && o.HeadStart < h) {
		return nil, fmt.Errorf("cusum k = %g, h = %g, head start = %g: %w", k, h, o.HeadStart, ErrParam)
	}
	return &cusumState{target: target, sigma: sigma, k: k, h: h, cp: o.HeadStart * sigma, cm: o.HeadStart * sigma}, nil
}

// add takes the next value; up and down report a fresh crossing of H.
func (s *cusumState) add(x float64) (cp, cm float64, up, down bool) {
	kk, hh := s.k*s.sigma, s.h*s.sigma
	s.cp = math.Max(0, x-s.target-kk+s.cp)
	s.cm = math.Max(0, s.target-kk-x+s.cm)
	s.np, s.nm = count(s.cp, s.np), count(s.cm, s.nm)
	up, down = s.cp > hh && !s.outP, s.cm > hh && !s.outM
	s.outP, s.outM = s.cp > hh, s.cm > hh
	return s.cp, s.cm, up, down
}

func count(c float64, n int) int {
	if c > 0 {
		return n + 1
	}
	return 0
}

// EWMAChart is the EWMA of individual values with exact time-varying
// limits. The target and σ (MR̄/d2) come from the baseline window unless
// given in o; z_0 is the target. Defaults λ = DefaultLambda, L = DefaultL.
func EWMAChart(x []float64, w Window, o Options) (Chart, error) {
	e, err := estimateIndividuals(x, w, o)
	if err != nil {
		return Chart{}, fmt.Errorf("ewma chart: %w", err)
	}
	s, err := newEWMA(e.mean, e.sigma, o)
	if err != nil {
		return Chart{}, fmt.Errorf("ewma chart: %w", err)
	}
	c := Chart{Kind: EWMA, Size: 1, Center: e.mean, Target: e.mean, Sigma: e.sigma, Method: e.method, Window: w, Base: w,
		Stat: make([]float64, len(x)), Upper: make([]float64, len(x)), Lower: make([]float64, len(x))}
	for i, v := range x {
		var side int
		c.Stat[i], c.Lower[i], c.Upper[i], side = s.add(v)
		if side != 0 {
			c.Alarms = append(c.Alarms, Alarm{Chart: EWMA, Rule: EWMASignal, Index: i, Unit: i, Points: []int{i}, Side: side, Onset: -1})
		}
	}
	Number(&c)
	return c, nil
}

// CUSUMChart is the tabular CUSUM of individual values: Stat holds C⁺,
// Stat2 holds −C⁻, the limits are ±H (in the units of x), the centre 0.
// Target and σ (MR̄/d2) come from the baseline window unless given in o.
// Each alarm carries Onset, the first point of the run of non-zero sums
// (the change is estimated to have happened just before it), and a Note
// with the estimated shifted mean μ0 ± (K + C/N).
func CUSUMChart(x []float64, w Window, o Options) (Chart, error) {
	e, err := estimateIndividuals(x, w, o)
	if err != nil {
		return Chart{}, fmt.Errorf("cusum chart: %w", err)
	}
	s, err := newCUSUM(e.mean, e.sigma, o)
	if err != nil {
		return Chart{}, fmt.Errorf("cusum chart: %w", err)
	}
	hh := s.h * e.sigma
	c := Chart{Kind: CUSUM, Size: 1, Center: 0, Target: e.mean, Sigma: e.sigma, Method: e.method, Window: w, Base: w,
		Stat: make([]float64, len(x)), Stat2: make([]float64, len(x)),
		Upper: fill(len(x), hh), Lower: fill(len(x), -hh)}
	for i, v := range x {
		cp, cm, up, down := s.add(v)
		c.Stat[i], c.Stat2[i] = cp, -cm
		if up {
			c.Alarms = append(c.Alarms, cusumAlarm(i, s.np, 1, e.mean+s.k*e.sigma+cp/float64(s.np)))
		}
		if down {
			c.Alarms = append(c.Alarms, cusumAlarm(i, s.nm, -1, e.mean-s.k*e.sigma-cm/float64(s.nm)))
		}
	}
	Number(&c)
	return c, nil
}

func cusumAlarm(i, n, side int, shifted float64) Alarm {
	r := CUSUMUp
	if side < 0 {
		r = CUSUMDown
	}
	on := i - n + 1
	return Alarm{Chart: CUSUM, Rule: r, Index: i, Unit: i, Points: span(on, i), Side: side, Onset: on,
		Note: fmt.Sprintf("change after point %d, mean now ≈ %.4g", on, shifted)}
}
