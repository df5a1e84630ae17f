package drift_test

import (
	"errors"
	"math"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"

	"padline/store/drift"
)

// NIST/SEMATECH e-Handbook §6.1.6 worked example, from memory (see
// DEVELOPERS.md "References"): USL 20, LSL 8, μ 16, σ 2 → Cp 1.000, Cpk 0.667.
// One-sided rows are derived from the definitions.
func TestIndices(t *testing.T) {
	nan := math.NaN()
	tests := []struct {
		mean, sigma, low, high float64
		cp, cpk                float64
	}{
		{16, 2, 8, 20, 1.000, 0.667},
		{16, 2, nan, 20, nan, 0.667},
		{16, 2, 8, nan, nan, 1.333},
	}
	for _, tc := range tests {
		cp, cpk := drift.Indices(tc.mean, tc.sigma, tc.low, tc.high)
		if (math.IsNaN(tc.cp) != math.IsNaN(cp)) || (!math.IsNaN(cp) && !near(cp, tc.cp, 5e-4)) || !near(cpk, tc.cpk, 5e-4) {
			t.Errorf("%+v: Cp %.3f Cpk %.3f", tc, cp, cpk)
		}
	}
}

// Hand-derived: 9, 11, 9, 11 … (20 values): mean 10, MR̄ = 2 so
// σwithin = 2/1.128; overall s = √(20/19). Limits 4 … 16.
func TestCapabilityOf(t *testing.T) {
	x := alternate(9, 11, 20)
	c, err := drift.CapabilityOf(x, 1, false, 4, 16)
	if err != nil {
		t.Fatal(err)
	}
	sw, so := 2/1.128, math.Sqrt(20.0/19)
	if c.Method != "MR̄/d2" || !near(c.SigmaWithin, sw, 1e-12) || !near(c.SigmaOverall, so, 1e-12) {
		t.Errorf("σ %s %.6f / %.6f, want MR̄/d2 %.6f / %.6f", c.Method, c.SigmaWithin, c.SigmaOverall, sw, so)
	}
	if !near(c.Cp, 12/(6*sw), 1e-12) || !near(c.Cpk, 6/(3*sw), 1e-12) || !near(c.Pp, 12/(6*so), 1e-12) || !near(c.Ppk, 6/(3*so), 1e-12) {
		t.Errorf("%+v", c)
	}
	// Subgroups of 2 (9, 11): R̄ = 2, σ = 2/1.128 again; s̄ = √2, σ = √2/0.7979.
	c, err = drift.CapabilityOf(x, 2, false, 4, 16)
	if err != nil || c.Method != "R̄/d2" || !near(c.SigmaWithin, sw, 1e-12) {
		t.Errorf("R̄/d2: %+v %v", c, err)
	}
	c, err = drift.CapabilityOf(x, 2, true, 4, 16)
	if err != nil || c.Method != "s̄/c4" || !near(c.SigmaWithin, math.Sqrt2/0.7979, 1e-12) {
		t.Errorf("s̄/c4: %+v %v", c, err)
	}
	if _, err := drift.CapabilityOf(x, 1, false, 16, 4); !errors.Is(err, drift.ErrParam) {
		t.Errorf("reversed limits: %v", err)
	}
}

// Clopper–Pearson (Biometrika 26:404–413, 1934). Checks from
// DEVELOPERS.md "References" (derived: 1 − 0.05^(1/n)): 0 of 100 one-sided 95 %
// upper 0.029513, 0 of 1000 0.0029912; rule of three (Hanley &
// Lippman-Hand, JAMA 1983) ≈ 3/n.
func TestClopperPearson(t *testing.T) {
	tests := []struct {
		x, n int
		want float64
	}{{0, 100, 0.029513}, {0, 1000, 0.0029912}}
	for _, tc := range tests {
		lo, hi, err := drift.ClopperPearson(tc.x, tc.n, 0.95, drift.UpperOnly)
		if err != nil {
			t.Fatal(err)
		}
		if lo != 0 || !near(hi, tc.want, 5e-7) || !near(hi, 1-math.Pow(0.05, 1/float64(tc.n)), 1e-9) {
			t.Errorf("%d of %d: [%g, %.7f], want upper %.7f", tc.x, tc.n, lo, hi, tc.want)
		}
		if r3 := 3 / float64(tc.n); math.Abs(hi-r3)/r3 > 0.02 {
			t.Errorf("%d of %d: upper %.5f far from rule of three %.5f", tc.x, tc.n, hi, r3)
		}
	}
}

// The exact interval's defining property (Clopper & Pearson 1934): at the
// upper bound P(X ≤ x) = α/2, at the lower P(X ≥ x) = α/2; checked with
// gonum's binomial CDF, independent of the Beta quantile used inside.
func TestClopperPearsonTails(t *testing.T) {
	for _, tc := range []struct{ x, n int }{{5, 10}, {1, 50}, {97, 100}, {480, 500}} {
		lo, hi, err := drift.ClopperPearson(tc.x, tc.n, 0.95, drift.TwoSided)
		if err != nil {
			t.Fatal(err)
		}
		up := distuv.Binomial{N: float64(tc.n), P: hi}.CDF(float64(tc.x))
		dn := 1 - distuv.Binomial{N: float64(tc.n), P: lo}.CDF(float64(tc.x-1))
		if !near(up, 0.025, 1e-6) || !near(dn, 0.025, 1e-6) {
			t.Errorf("%d of %d: [%.5f, %.5f] tails %.6f %.6f", tc.x, tc.n, lo, hi, dn, up)
		}
	}
	if _, _, err := drift.ClopperPearson(3, 2, 0.95, drift.TwoSided); !errors.Is(err, drift.ErrParam) {
		t.Errorf("x > n: %v", err)
	}
}

func TestFirstPassYield(t *testing.T) {
	y, err := drift.FirstPassYield(1000, 1000, 0.95)
	if err != nil {
		t.Fatal(err)
	}
	// All pass: upper 1; lower = 1 − (two-sided 97.5 % upper of 0 of 1000) = 0.025^(1/1000) (derived).
	if y.Rate != 1 || y.High != 1 || !near(y.Low, math.Pow(0.025, 1.0/1000), 1e-9) {
		t.Errorf("%+v", y)
	}
}
