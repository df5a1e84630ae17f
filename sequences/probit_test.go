package sequences_test

import (
	"errors"
	"math"
	"testing"

	"gonum.org/v1/gonum/diff/fd"
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"

	"padline/sequences"
)

// refNLP is the probit negative log-likelihood (Finney, Probit Analysis,
// 3rd ed., 1971: P = Φ((x−μ)/σ), maximum likelihood) plus the log-normal
// penalty on σ, written here independently of the package in (μ, σ), with
// Φ from gonum's distuv.Normal.
func refNLP(data []sequences.Tally, prior sequences.ProbitPrior) func(x []float64) float64 {
	std := distuv.Normal{Mu: 0, Sigma: 1}
	return func(x []float64) float64 {
		mu, sigma := x[0], x[1]
		if !(sigma > 0) {
			return math.Inf(1)
		}
		var f float64
		for _, d := range data {
			p := std.CDF((d.PF - mu) / sigma)
			if d.Highs > 0 {
				f -= float64(d.Highs) * math.Log(p)
			}
			if d.N > d.Highs {
				f -= float64(d.N-d.Highs) * math.Log(1-p)
			}
		}
		if prior.LogSD > 0 {
			r := (math.Log(sigma) - math.Log(prior.SigmaPF)) / prior.LogSD
			f += r * r / 2
		}
		return f
	}
}

// gridMin minimises f(μ, σ) by brute force: a 61×61 grid over the span of
// the data and σ from 0.01 to the span, zoomed by 4 around the best node
// until the nodes are 1e-7 apart. (gonum/optimize would be the natural
// reference, but it pulls in golang.org/x/tools, which go.sum lacks.)
func gridMin(f func([]float64) float64, data []sequences.Tally) (mu, sigma float64) {
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, d := range data {
		lo, hi = math.Min(lo, d.PF), math.Max(hi, d.PF)
	}
	const n = 60
	muLo, muHi := lo, hi
	// Search ln σ so that small σ is resolved as finely as large.
	sLo, sHi := math.Log(0.01), math.Log(hi-lo)
	for muHi-muLo > 1e-8 || sHi-sLo > 1e-9 {
		best := math.Inf(1)
		var bi, bj int
		for i := 0; i <= n; i++ {
			for j := 0; j <= n; j++ {
				m := muLo + (muHi-muLo)*float64(i)/n
				s := sLo + (sHi-sLo)*float64(j)/n
				if v := f([]float64{m, math.Exp(s)}); v < best {
					best, bi, bj = v, i, j
				}
			}
		}
		mu = muLo + (muHi-muLo)*float64(bi)/n
		s := sLo + (sHi-sLo)*float64(bj)/n
		dm, ds := (muHi-muLo)/8, (sHi-sLo)/8
		muLo, muHi, sLo, sHi = mu-dm, mu+dm, s-ds, s+ds
		sigma = math.Exp(s)
	}
	return mu, sigma
}

func TestFitProbitAgainstReference(t *testing.T) {
	weak := sequences.ProbitPrior{SigmaPF: 0.6 / 2.563, LogSD: 0.7}
	tests := []struct {
		name  string
		data  []sequences.Tally
		prior sequences.ProbitPrior
	}{
		{"overlapping, no prior", []sequences.Tally{
			{10, 8, 0}, {10.5, 8, 2}, {11, 8, 4}, {11.5, 8, 7}, {12, 8, 8},
		}, sequences.ProbitPrior{}},
		{"overlapping, prior", []sequences.Tally{
			{10, 8, 0}, {10.5, 8, 2}, {11, 8, 4}, {11.5, 8, 7}, {12, 8, 8},
		}, weak},
		{"bracket plus two batches", []sequences.Tally{
			{4.6, 1, 0}, {68.6, 1, 1}, {36.6, 1, 1}, {20.6, 1, 1}, {12.6, 1, 0}, {16.6, 5, 3},
			{14.6, 1, 0}, {15.6, 1, 0}, {16.1, 5, 1}, {17.1, 1, 1},
		}, weak},
		{"separated, prior only bounds σ", []sequences.Tally{
			{5, 1, 0}, {10, 1, 0}, {10.5, 1, 1}, {20, 1, 1},
		}, weak},
		{"unsorted with repeated levels", []sequences.Tally{
			{21, 4, 4}, {20, 3, 1}, {19.5, 6, 0}, {20, 5, 3}, {20.5, 4, 3}, {19, 0, 0},
		}, sequences.ProbitPrior{SigmaPF: 0.3, LogSD: 1.2}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, err := sequences.FitProbit(tt.data, tt.prior)
			if err != nil {
				t.Fatalf("FitProbit: %v", err)
			}
			f := refNLP(tt.data, tt.prior)
			mu, sigma := gridMin(f, tt.data)
			if math.Abs(got.MuPF-mu) > 1e-4 || math.Abs(got.SigmaPF-sigma) > 1e-4 {
				t.Errorf("fit μ %.6f σ %.6f, brute-force grid μ %.6f σ %.6f", got.MuPF, got.SigmaPF, mu, sigma)
			}
			// Standard errors: inverse of gonum's finite-difference Hessian
			// of the same objective at the optimum.
			var h mat.SymDense
			fd.Hessian(&h, f, []float64{got.MuPF, got.SigmaPF}, &fd.Settings{Step: 1e-5})
			var inv mat.Dense
			if err := inv.Inverse(&h); err != nil {
				t.Fatalf("invert reference Hessian: %v", err)
			}
			seMu, seSigma := math.Sqrt(inv.At(0, 0)), math.Sqrt(inv.At(1, 1))
			if math.Abs(got.SEMuPF/seMu-1) > 1e-3 || math.Abs(got.SESigmaPF/seSigma-1) > 1e-3 {
				t.Errorf("SE μ %.6f σ %.6f, finite-difference Hessian gives %.6f %.6f", got.SEMuPF, got.SESigmaPF, seMu, seSigma)
			}
			if math.Abs(got.SpreadPF()-2*1.2815516*got.SigmaPF) > 1e-6 { // Φ⁻¹(0.9) = 1.2815516 (normal table)
				t.Errorf("spread %.6f for σ %.6f", got.SpreadPF(), got.SigmaPF)
			}
		})
	}
}

func TestFitProbitDeviance(t *testing.T) {
	data := []sequences.Tally{{10, 8, 0}, {10.5, 8, 2}, {11, 8, 4}, {11.5, 8, 7}, {12, 8, 8}}
	fit, err := sequences.FitProbit(data, sequences.ProbitPrior{})
	if err != nil {
		t.Fatal(err)
	}
	// Deviance against the saturated model, G² = 2·Σ o·ln(o/e), written out
	// here with gonum's Φ (Finney, Probit Analysis, 3rd ed., χ² goodness of fit).
	std := distuv.Normal{Mu: 0, Sigma: 1}
	var dev float64
	for _, d := range data {
		p := std.CDF((d.PF - fit.MuPF) / fit.SigmaPF)
		for _, c := range []struct{ o, e float64 }{{float64(d.Highs), float64(d.N) * p}, {float64(d.N - d.Highs), float64(d.N) * (1 - p)}} {
			if c.o > 0 {
				dev += 2 * c.o * math.Log(c.o/c.e)
			}
		}
	}
	if math.Abs(fit.Deviance-dev) > 1e-6 || fit.DF != 3 {
		t.Errorf("deviance %.6f on %d df, want %.6f on 3", fit.Deviance, fit.DF, dev)
	}
	if want := (distuv.ChiSquared{K: 3}).Survival(dev); math.Abs(fit.PConsistent-want) > 1e-6 {
		t.Errorf("PConsistent %.6f, want %.6f", fit.PConsistent, want)
	}
}

func TestFitProbitErrors(t *testing.T) {
	tests := []struct {
		name  string
		data  []sequences.Tally
		prior sequences.ProbitPrior
		want  error
	}{
		{"empty", nil, sequences.ProbitPrior{}, sequences.ErrProbitData},
		{"all low", []sequences.Tally{{1, 4, 0}, {2, 4, 0}}, sequences.ProbitPrior{SigmaPF: 0.2, LogSD: 0.7}, sequences.ErrProbitData},
		{"all high", []sequences.Tally{{1, 4, 4}}, sequences.ProbitPrior{SigmaPF: 0.2, LogSD: 0.7}, sequences.ErrProbitData},
		{"highs above n", []sequences.Tally{{1, 4, 5}, {2, 4, 0}}, sequences.ProbitPrior{}, sequences.ErrProbitData},
		{"separated without prior", []sequences.Tally{{1, 4, 0}, {2, 4, 4}}, sequences.ProbitPrior{}, sequences.ErrProbitFit},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if _, err := sequences.FitProbit(tt.data, tt.prior); !errors.Is(err, tt.want) {
				t.Errorf("err %v, want %v", err, tt.want)
			}
		})
	}
}

// TestFitProbitFarTail keeps the fit finite when a level sits tens of σ
// from the transition (the direct ln Φ underflows there).
func TestFitProbitFarTail(t *testing.T) {
	data := []sequences.Tally{{0, 1, 0}, {100, 1, 1}, {16, 6, 3}, {16.5, 6, 5}, {15.5, 6, 1}}
	fit, err := sequences.FitProbit(data, sequences.ProbitPrior{SigmaPF: 0.2, LogSD: 0.7})
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(fit.MuPF-16) > 0.3 || math.IsNaN(fit.SEMuPF) || math.IsInf(fit.SEMuPF, 0) {
		t.Errorf("fit %+v", fit)
	}
}
