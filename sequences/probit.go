package sequences

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// ErrProbitData is returned by FitProbit when the tallies cannot locate a
// transition: no samples, or no low or no high reading at all.
var ErrProbitData = errors.New("sequences: probit data hold no transition")

// ErrProbitFit is returned by FitProbit when the fit does not converge, as
// happens for an unpenalised fit of perfectly separated data.
var ErrProbitFit = errors.New("sequences: probit fit did not converge")

// Tally is the latch readings taken at one capacitance: N samples, Highs of
// them read 1.
type Tally struct {
	PF    float64
	N     int
	Highs int
}

// ProbitPrior is a log-normal prior on the transition's σ: ln σ ~
// N(ln SigmaPF, LogSD²). LogSD = 0 means no prior (a plain maximum-likelihood
// fit).
type ProbitPrior struct {
	SigmaPF float64
	LogSD   float64
}

// ProbitFit is a fitted transition P(latch high | C) = Φ((C − μ)/σ) (Finney,
// Probit Analysis, 3rd ed., 1971), the maximum of the likelihood (times the
// prior, when one is set), with standard errors from the observed
// information (the inverse Hessian of the negative log posterior in μ and
// ln σ).
type ProbitFit struct {
	MuPF      float64 // the 50 % point
	SigmaPF   float64 // the transition's σ
	SEMuPF    float64 // standard error of MuPF
	SESigmaPF float64 // standard error of SigmaPF (delta method from ln σ)
	Deviance  float64 // against the saturated model, one parameter per tally
	DF        int     // tallies with samples − 2 (0 when fewer than 3)
	// PConsistent is the chi-square tail probability of Deviance on DF
	// degrees of freedom (1 when DF = 0): tiny values mean the readings do
	// not follow one monotone transition.
	PConsistent float64
	Iterations  int
}

// SpreadPF is the 10–90 % width of the fitted transition, 2·1.2816·σ.
func (f ProbitFit) SpreadPF() float64 { return spreadPerSigma * f.SigmaPF }

// spreadPerSigma is the 10–90 % width of a normal transition in σ:
// 2·Φ⁻¹(0.9) = 2·1.281552.
const spreadPerSigma = 2 * 1.2815515655446004

// FitProbit fits a probit transition to the tallies. Tallies with N = 0 are
// ignored; PF values need not be sorted or distinct.
func FitProbit(data []Tally, prior ProbitPrior) (ProbitFit, error) {
	var n, h int
	var lo, hi = math.Inf(1), math.Inf(-1)
	maxLow, minHigh := math.Inf(-1), math.Inf(1) // highest level with a low, lowest with a high
	for _, d := range data {
		if d.N < 0 || d.Highs < 0 || d.Highs > d.N {
			return ProbitFit{}, fmt.Errorf("tally at %g pF: %d of %d high: %w", d.PF, d.Highs, d.N, ErrProbitData)
		}
		if d.N == 0 {
			continue
		}
		n += d.N
		h += d.Highs
		if d.Highs > 0 {
			minHigh = math.Min(minHigh, d.PF)
		}
		if d.Highs < d.N {
			maxLow = math.Max(maxLow, d.PF)
		}
		lo, hi = math.Min(lo, d.PF), math.Max(hi, d.PF)
	}
	if n == 0 || h == 0 || h == n {
		return ProbitFit{}, ErrProbitData
	}
	if prior.LogSD == 0 && maxLow <= minHigh {
		// Separated readings: the likelihood grows without bound as σ → 0.
		return ProbitFit{}, fmt.Errorf("readings separated at %g–%g pF: %w", maxLow, minHigh, ErrProbitFit)
	}
	mu0 := midTransition(data)
	sigma0 := prior.SigmaPF
	if prior.LogSD == 0 || !(sigma0 > 0) {
		sigma0 = math.Max((hi-lo)/4, 1e-3)
	}
	return fitProbit(data, prior, mu0, math.Log(sigma0))
}

// midTransition is a starting value for μ: the sample-weighted mean level.
func midTransition(data []Tally) float64 {
	var sum float64
	var n int
	for _, d := range data {
		if d.N == 0 {
			continue
		}
		sum += d.PF * float64(d.N)
		n += d.N
	}
	return sum / float64(n)
}

// nlp returns the negative log posterior and its gradient and Hessian in
// (μ, s = ln σ).
func nlp(data []Tally, prior ProbitPrior, mu, s float64) (f float64, g [2]float64, h [2][2]float64) {
	sigma := math.Exp(s)
	for _, d := range data {
		if d.N == 0 {
			continue
		}
		z := (d.PF - mu) / sigma
		nh, nl := float64(d.Highs), float64(d.N-d.Highs)
		// ℓ = nh·ln Φ(z) + nl·ln Φ(−z); derivatives in z, then chain rule
		// with dz/dμ = −1/σ, dz/ds = −z, d²z/dμds = 1/σ, d²z/ds² = z.
		var l, dl, d2l float64
		if nh > 0 {
			lam := millsInv(z)
			l += nh * logPhi(z)
			dl += nh * lam
			d2l -= nh * lam * (z + lam)
		}
		if nl > 0 {
			lam := millsInv(-z)
			l += nl * logPhi(-z)
			dl -= nl * lam
			d2l -= nl * lam * (-z + lam)
		}
		f -= l
		g[0] -= dl * (-1 / sigma)
		g[1] -= dl * (-z)
		h[0][0] -= d2l / (sigma * sigma)
		h[0][1] -= (d2l*z + dl) / sigma
		h[1][1] -= d2l*z*z + dl*z
	}
	h[1][0] = h[0][1]
	if prior.LogSD > 0 {
		r := (s - math.Log(prior.SigmaPF)) / prior.LogSD
		f += r * r / 2
		g[1] += r / prior.LogSD
		h[1][1] += 1 / (prior.LogSD * prior.LogSD)
	}
	return f, g, h
}

// fitProbit minimises nlp by a damped Newton method from (mu, s).
func fitProbit(data []Tally, prior ProbitPrior, mu, s float64) (ProbitFit, error) {
	const (
		maxIter = 100
		sMin    = -12 // σ ≥ 6e-6 pF
		sMax    = 8   // σ ≤ 3000 pF
	)
	f, g, h := nlp(data, prior, mu, s)
	it := 0
	for ; it < maxIter; it++ {
		// Newton direction, shifted towards gradient descent when the
		// Hessian is not positive definite.
		a, b, c := h[0][0], h[0][1], h[1][1]
		shift := 0.0
		for range 60 {
			aa, cc := a+shift, c+shift
			if aa > 0 && aa*cc-b*b > 1e-14*aa*cc {
				break
			}
			shift = math.Max(2*shift, 1e-6*(math.Abs(a)+math.Abs(c))+1e-9)
		}
		aa, cc := a+shift, c+shift
		det := aa*cc - b*b
		dmu := -(cc*g[0] - b*g[1]) / det
		ds := -(aa*g[1] - b*g[0]) / det
		// Keep one step within reason: μ by a few σ, ln σ by 1.
		sigma := math.Exp(s)
		if lim := 4 * sigma; math.Abs(dmu) > lim {
			ds *= lim / math.Abs(dmu)
			dmu = math.Copysign(lim, dmu)
		}
		if math.Abs(ds) > 1 {
			dmu /= math.Abs(ds)
			ds = math.Copysign(1, ds)
		}
		// Backtrack until the objective does not increase.
		step := 1.0
		var nf float64
		var ng [2]float64
		var nh [2][2]float64
		var nmu, ns float64
		accepted := false
		for range 40 {
			nmu, ns = mu+step*dmu, math.Min(math.Max(s+step*ds, sMin), sMax)
			nf, ng, nh = nlp(data, prior, nmu, ns)
			if nf <= f+1e-12*math.Abs(f) {
				accepted = true
				break
			}
			step /= 2
		}
		if !accepted {
			break
		}
		moved := math.Abs(nmu-mu) + math.Abs(ns-s)
		mu, s, f, g, h = nmu, ns, nf, ng, nh
		if moved < 1e-10*(1+math.Abs(mu)) {
			break
		}
	}
	if s <= sMin+1e-9 || s >= sMax-1e-9 || math.IsNaN(mu) || math.IsNaN(f) {
		return ProbitFit{}, ErrProbitFit
	}
	if math.Hypot(g[0]*math.Exp(s), g[1]) > 1e-5*(1+math.Abs(f)) {
		return ProbitFit{}, fmt.Errorf("gradient %.3g after %d iterations: %w", math.Hypot(g[0], g[1]), it, ErrProbitFit)
	}
	sigma := math.Exp(s)
	fit := ProbitFit{MuPF: mu, SigmaPF: sigma, Iterations: it, PConsistent: 1}
	det := h[0][0]*h[1][1] - h[0][1]*h[1][0]
	if det > 0 && h[0][0] > 0 {
		fit.SEMuPF = math.Sqrt(h[1][1] / det)
		fit.SESigmaPF = sigma * math.Sqrt(h[0][0]/det)
	} else {
		fit.SEMuPF, fit.SESigmaPF = math.Inf(1), math.Inf(1)
	}
	fit.Deviance, fit.DF = deviance(data, mu, sigma)
	if fit.DF > 0 {
		fit.PConsistent = distuv.ChiSquared{K: float64(fit.DF)}.Survival(fit.Deviance)
	}
	return fit, nil
}

// deviance is 2·Σ[h·ln(h/(n·p)) + (n−h)·ln((n−h)/(n·(1−p)))] over the
// tallies with samples, with its degrees of freedom (tallies − 2).
func deviance(data []Tally, mu, sigma float64) (float64, int) {
	var dev float64
	var k int
	for _, d := range data {
		if d.N == 0 {
			continue
		}
		k++
		z := (d.PF - mu) / sigma
		n := float64(d.N)
		if d.Highs > 0 {
			hh := float64(d.Highs)
			dev += 2 * hh * (math.Log(hh/n) - logPhi(z))
		}
		if d.Highs < d.N {
			ll := float64(d.N - d.Highs)
			dev += 2 * ll * (math.Log(ll/n) - logPhi(-z))
		}
	}
	return math.Max(dev, 0), max(k-2, 0)
}

// phi is the standard normal density.
func phi(z float64) float64 { return math.Exp(-z*z/2) / math.Sqrt(2*math.Pi) }

// normCDF is the standard normal distribution function Φ.
func normCDF(z float64) float64 { return 0.5 * math.Erfc(-z/math.Sqrt2) }

// bigZ is where the direct forms give way to the asymptotic ones.
const bigZ = 30

// logPhi is ln Φ(z), accurate in the far lower tail.
func logPhi(z float64) float64 {
	if z > -bigZ {
		return math.Log(normCDF(z))
	}
	// Φ(z) ≈ φ(z)/(−z)·(1 − 1/z² + 3/z⁴ − 15/z⁶), z → −∞.
	z2 := z * z
	return -z2/2 - math.Log(-z) - 0.5*math.Log(2*math.Pi) + math.Log1p(-1/z2+3/(z2*z2)-15/(z2*z2*z2))
}

// millsInv is φ(z)/Φ(z), the inverse Mills ratio, accurate in the far
// lower tail.
func millsInv(z float64) float64 {
	if z > -bigZ {
		return phi(z) / normCDF(z)
	}
	z2 := z * z
	return -z / (1 - 1/z2 + 3/(z2*z2) - 15/(z2*z2*z2))
}

// fisher is the expected information matrix of one sample at pf about
// (μ, ln σ).
func fisher(pf, mu, sigma float64) [2][2]float64 {
	z := (pf - mu) / sigma
	var w float64
	if math.Abs(z) < 37 {
		p, q := normCDF(z), normCDF(-z)
		if p > 0 && q > 0 {
			ph := phi(z)
			w = ph * ph / (p * q)
		}
	}
	return [2][2]float64{
		{w / (sigma * sigma), w * z / sigma},
		{w * z / sigma, w * z * z},
	}
}
