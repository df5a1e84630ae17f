package drift_test

import (
	"errors"
	"math"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"

	"padline/store/drift"
)

// Rows n = 2, 3, 4, 5, 10: DEVELOPERS.md "References" "Shewhart constants"
// (ASTM E2587; Montgomery, Introduction to SQC, Appendix VI), confirmed.
// Rows 6–9 are from memory of Montgomery Appendix VI and are held to the
// relations and the integrals below instead.
func TestConstantsPublishedRows(t *testing.T) {
	want := []drift.Constants{
		{N: 2, A2: 1.880, A3: 2.659, C4: 0.7979, B3: 0, B4: 3.267, D2: 1.128, D3: 0.853, RangeLow: 0, RangeHigh: 3.267},
		{N: 3, A2: 1.023, A3: 1.954, C4: 0.8862, B3: 0, B4: 2.568, D2: 1.693, D3: 0.888, RangeLow: 0, RangeHigh: 2.574},
		{N: 4, A2: 0.729, A3: 1.628, C4: 0.9213, B3: 0, B4: 2.266, D2: 2.059, D3: 0.880, RangeLow: 0, RangeHigh: 2.282},
		{N: 5, A2: 0.577, A3: 1.427, C4: 0.9400, B3: 0, B4: 2.089, D2: 2.326, D3: 0.864, RangeLow: 0, RangeHigh: 2.114},
		{N: 10, A2: 0.308, A3: 0.975, C4: 0.9727, B3: 0.284, B4: 1.716, D2: 3.078, D3: 0.797, RangeLow: 0.223, RangeHigh: 1.777},
	}
	for _, w := range want {
		got, err := drift.ConstantsFor(w.N)
		if err != nil {
			t.Fatal(err)
		}
		if got != w {
			t.Errorf("n = %d: got %+v, want %+v", w.N, got, w)
		}
	}
	if len(drift.Table()) != 9 {
		t.Errorf("table has %d rows, want 9 (n = 2…10)", len(drift.Table()))
	}
	for _, n := range []int{1, 11} {
		if _, err := drift.ConstantsFor(n); !errors.Is(err, drift.ErrSubgroupSize) {
			t.Errorf("n = %d: err %v, want ErrSubgroupSize", n, err)
		}
	}
}

// Relations from DEVELOPERS.md "References": A2 = 3/(d2√n), A3 = 3/(c4√n),
// D3,4 = 1 ∓ 3·d3/d2 floored at 0; and B3,4 = 1 ∓ 3·√(1−c4²)/c4 (the s
// chart limits c4σ ± 3σ√(1−c4²) divided by c4, Montgomery §6.3). The table
// is rounded to three places from unrounded d2, d3, so the relations are
// held to 2e-3 (D4 at n = 2 from the rounded d2, d3 is 3.2686 against the
// published 3.267).
func TestConstantsRelations(t *testing.T) {
	const tol = 2e-3
	for _, k := range drift.Table() {
		n := float64(k.N)
		checks := []struct {
			name      string
			got, want float64
		}{
			{"A2", k.A2, 3 / (k.D2 * math.Sqrt(n))},
			{"A3", k.A3, 3 / (k.C4 * math.Sqrt(n))},
			{"D3", k.RangeLow, math.Max(0, 1-3*k.D3/k.D2)},
			{"D4", k.RangeHigh, 1 + 3*k.D3/k.D2},
			{"B3", k.B3, math.Max(0, 1-3*math.Sqrt(1-k.C4*k.C4)/k.C4)},
			{"B4", k.B4, 1 + 3*math.Sqrt(1-k.C4*k.C4)/k.C4},
			// c4 from the gamma function, exact mathematics; table has 4 places.
			{"c4", k.C4, drift.C4(k.N)},
		}
		for _, c := range checks {
			if math.Abs(c.got-c.want) > tol {
				t.Errorf("n = %d %s: table %.4f, relation %.4f", k.N, c.name, c.got, c.want)
			}
		}
		if math.Abs(k.C4-drift.C4(k.N)) > 5e-5 {
			t.Errorf("n = %d c4: table %.4f, gamma %.6f", k.N, k.C4, drift.C4(k.N))
		}
	}
}

// d2 and d3 are the mean and standard deviation of the range of n standard
// normal values (definition, e.g. Montgomery §6.2). Compute both by
// numerical integration and hold the table to its rounding:
// E[R] = ∫ 1 − Φ(x)ⁿ − (1−Φ(x))ⁿ dx,
// E[R²] = 2 ∫∫_{x<y} 1 − Φ(y)ⁿ − (1−Φ(x))ⁿ + (Φ(y)−Φ(x))ⁿ dx dy.
func TestConstantsIntegrals(t *testing.T) {
	const lo, hi, h = -8.0, 8.0, 0.01
	var xs, phi []float64
	for x := lo; x <= hi; x += h {
		xs = append(xs, x)
		phi = append(phi, distuv.UnitNormal.CDF(x))
	}
	for _, k := range drift.Table() {
		n := float64(k.N)
		var er, er2 float64
		for i := range xs {
			diag := 1 - math.Pow(phi[i], n) - math.Pow(1-phi[i], n)
			er += diag * h
			er2 += diag * h * h // the half-cell on the diagonal x = y
			for j := i + 1; j < len(xs); j++ {
				er2 += 2 * (1 - math.Pow(phi[j], n) - math.Pow(1-phi[i], n) + math.Pow(phi[j]-phi[i], n)) * h * h
			}
		}
		d3 := math.Sqrt(er2 - er*er)
		if math.Abs(er-k.D2) > 6e-4 {
			t.Errorf("n = %d d2: table %.3f, integral %.5f", k.N, k.D2, er)
		}
		if math.Abs(d3-k.D3) > 2e-3 {
			t.Errorf("n = %d d3: table %.3f, integral %.5f", k.N, k.D3, d3)
		}
	}
}
