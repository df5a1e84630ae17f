package drift_test

import (
	"math"
	"testing"

	"padline/store/drift"
)

// NIST/SEMATECH e-Handbook §6.3.2.4 worked example (DEVELOPERS.md "References"):
// z0 = 50, s = 2.0539, λ = 0.3, k = 3. The handbook prints the EWMA to two
// places (tolerance 0.005) and truncates the limits (tolerance 1e-3); by
// point 20 the exact limits equal the asymptotic ones to 1e-6.
func TestEWMANISTExample(t *testing.T) {
	x := []float64{52.0, 47.0, 53.0, 49.3, 50.1, 47.0, 51.0, 50.1, 51.2, 50.5, 49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1}
	want := []float64{50.60, 49.52, 50.56, 50.18, 50.16, 49.21, 49.75, 49.85, 50.26, 50.33, 50.11, 49.36, 49.52, 50.05, 49.38, 49.92, 50.73, 51.23, 51.94, 51.99}
	c, err := drift.EWMAChart(x, drift.FirstN(len(x)), drift.Options{Target: 50, FixTarget: true, Sigma: 2.0539, Lambda: 0.3, L: 3})
	if err != nil {
		t.Fatal(err)
	}
	for i := range want {
		if !near(c.Stat[i], want[i], 0.005) {
			t.Errorf("z[%d] = %.4f, handbook %.2f", i+1, c.Stat[i], want[i])
		}
		if i > 0 && !(c.Upper[i] > c.Upper[i-1]) {
			t.Errorf("exact UCL not widening at %d", i+1)
		}
	}
	if !near(c.Upper[19], 52.5884, 1e-3) || !near(c.Lower[19], 47.4115, 1e-3) {
		t.Errorf("limits %.4f/%.4f, handbook 52.5884/47.4115", c.Upper[19], c.Lower[19])
	}
	// Point 1, exact form (derived): 50 + 3·2.0539·√(0.3/1.7·(1−0.7²)).
	if u := 50 + 3*2.0539*math.Sqrt(0.3/1.7*(1-0.49)); !near(c.Upper[0], u, 1e-12) {
		t.Errorf("UCL[1] = %.6f, want %.6f", c.Upper[0], u)
	}
	if len(c.Alarms) != 0 {
		t.Errorf("handbook: no signal; got %+v", c.Alarms)
	}
}

var montgomery = []float64{9.45, 7.99, 9.29, 11.66, 12.16, 10.18, 8.04, 11.46, 9.20, 10.34, 9.03, 11.47, 10.51, 9.40, 10.08,
	9.37, 10.62, 10.31, 8.52, 10.84, 10.90, 9.33, 12.29, 11.50, 10.60, 11.08, 10.38, 11.62, 11.31, 10.52}

// Montgomery, Introduction to Statistical Quality Control, Example 9.1 (and
// DEVELOPERS.md "References"): μ0 = 10, σ = 1, k = 0.5, h = 5. C⁺ printed to
// two places; first signal at period 29; N⁺ = 7, so the shift began after
// period 22; shifted mean estimate μ0 + K + C⁺/N⁺ = 10.5 + 5.28/7 = 11.25.
func TestCUSUMMontgomeryExample(t *testing.T) {
	want := []float64{0, 0, 0, 1.16, 2.82, 2.50, 0.04, 1.00, 0, 0, 0, 0.97, 0.98, 0, 0, 0, 0.12, 0, 0, 0.34, 0.74, 0, 1.79, 2.79, 2.89, 3.47, 3.35, 4.47, 5.28}
	c, err := drift.CUSUMChart(montgomery, drift.FirstN(len(montgomery)), drift.Options{Target: 10, FixTarget: true, Sigma: 1, K: 0.5, H: 5})
	if err != nil {
		t.Fatal(err)
	}
	for i := range want {
		if !near(c.Stat[i], want[i], 0.005) {
			t.Errorf("C+[%d] = %.4f, book %.2f", i+1, c.Stat[i], want[i])
		}
	}
	if len(c.Alarms) != 1 {
		t.Fatalf("alarms %+v, want one", c.Alarms)
	}
	a := c.Alarms[0]
	if a.Rule != drift.CUSUMUp || a.Index != 28 || a.Onset != 22 || len(a.Points) != 7 {
		t.Errorf("alarm %s at period %d onset after period %d N+ %d; want cusum+ at 29, after 22, N+ 7",
			a.Rule, a.Index+1, a.Onset, len(a.Points))
	}
	if a.Note != "change after point 22, mean now ≈ 11.25" {
		t.Errorf("note %q", a.Note)
	}
	if c.Upper[0] != 5 || c.Lower[0] != -5 || c.Center != 0 {
		t.Errorf("limits %g/%g centre %g, want ±5 about 0", c.Upper[0], c.Lower[0], c.Center)
	}
}

// Fast initial response (Lucas & Crosier's head start, Montgomery §9.1.4):
// sums start at H/2. Hand-derived: with μ0 = 10, σ = 1, k = 0.5, h = 5,
// data at 11.5 rise by 1 a point: no head start signals at point 6 (C⁺ = 6),
// a 2.5 head start at point 3 (C⁺ = 5.5); the first Montgomery value gives
// C⁺₁ = max(0, 9.45 − 10.5 + 2.5) = 1.45.
func TestCUSUMHeadStart(t *testing.T) {
	o := drift.Options{Target: 10, FixTarget: true, Sigma: 1, K: 0.5, H: 5}
	for _, tc := range []struct {
		head  float64
		index int
	}{{0, 5}, {2.5, 2}} {
		o.HeadStart = tc.head
		c, err := drift.CUSUMChart(rep(11.5, 10), drift.FirstN(10), o)
		if err != nil {
			t.Fatal(err)
		}
		if len(c.Alarms) != 1 || c.Alarms[0].Index != tc.index {
			t.Errorf("head start %g: alarms %+v, want one at %d", tc.head, c.Alarms, tc.index)
		}
	}
	c, err := drift.CUSUMChart(montgomery, drift.FirstN(30), o)
	if err != nil {
		t.Fatal(err)
	}
	if !near(c.Stat[0], 1.45, 1e-12) {
		t.Errorf("C+[1] with head start = %g, want 1.45", c.Stat[0])
	}
}

// A lower-side shift signals on C⁻, shown as −C⁻ in Stat2.
func TestCUSUMDownward(t *testing.T) {
	c, err := drift.CUSUMChart(rep(8.5, 10), drift.FirstN(10), drift.Options{Target: 10, FixTarget: true, Sigma: 1})
	if err != nil {
		t.Fatal(err)
	}
	if len(c.Alarms) != 1 || c.Alarms[0].Rule != drift.CUSUMDown || c.Alarms[0].Index != 5 || c.Stat2[5] != -6 {
		t.Errorf("alarms %+v stat2 %v", c.Alarms, c.Stat2)
	}
}
