package drift_test

import (
	"fmt"
	"strings"
	"testing"

	"padline/store/drift"
)

// Montgomery, Introduction to Statistical Quality Control, Example 9.1: the
// book concludes from the CUSUM (signal at period 29, N⁺ = 7) that the
// shift began after period 22. Hinkley's maximum-likelihood change point
// over the same 30 values reproduces it: the first shifted point is period
// 23, and the mean from there on is 11.1625 (1.1625 above μ0 = 10; the
// same figures from R: which.max((n−t+1)·(mean(x[t:n])−10)²) = 23).
func TestChangePointMontgomery(t *testing.T) {
	at, shift := drift.ChangePoint(montgomery, 10, 0)
	if at != 22 || !near(shift, 1.1625, 1e-9) {
		t.Errorf("change point %d (period %d), shift %.4f; want period 23 (after 22), 1.1625", at, at+1, shift)
	}
	c, err := drift.CUSUMChart(montgomery, drift.FirstN(len(montgomery)), drift.Options{Target: 10, FixTarget: true, Sigma: 1, K: 0.5, H: 5})
	if err != nil {
		t.Fatal(err)
	}
	f := drift.Assess(montgomery, c.Alarms, 10, 1, drift.Window{})
	if !f.Drifting || f.Change != 22 || f.Signal.Rule != drift.CUSUMUp || f.Signal.Unit != 28 || f.Before != 0 {
		t.Fatalf("finding %+v; want drifting from index 22, CUSUM+ at 28", f)
	}
	got := f.Sentence("weight", "g", "line 1", func(i int) string { return fmt.Sprintf("period %d", i+1) })
	want := "weight rose 1.2 g (1.2 σ) from period 23 on line 1 (CUSUM+ signalled at period 29)"
	if got != want {
		t.Errorf("sentence\n got %q\nwant %q", got, want)
	}
}

// A step down is found on its side; alarms before it are counted as
// earlier; no alarms means in control.
func TestAssessStepDownAndQuiet(t *testing.T) {
	x := make([]float64, 200)
	for i := range x {
		x[i] = 10 + 0.3*float64(i%3-1) // small in-control wiggle
		if i >= 120 {
			x[i] -= 2
		}
	}
	alarms := []drift.Alarm{
		{Seq: 1, Chart: drift.Individuals, Rule: drift.WE1, Unit: 40, Side: 1},
		{Seq: 2, Chart: drift.CUSUM, Rule: drift.CUSUMDown, Unit: 125, Side: -1},
	}
	f := drift.Assess(x, alarms, 10, 0.5, drift.FirstN(50))
	if !f.Drifting || f.Change != 120 || !near(f.ShiftX, -2, 0.01) || !near(f.ShiftSigma, -4, 0.02) || f.Before != 1 {
		t.Fatalf("finding %+v", f)
	}
	s := f.Sentence("trip point of QM-205", "pF", "", func(i int) string { return fmt.Sprintf("S%d", i) })
	for _, w := range []string{"fell 2 pF (4 σ) from S120", "CUSUM− signalled at S125", "1 earlier alarm(s) from S40"} {
		if !strings.Contains(s, w) {
			t.Errorf("sentence %q lacks %q", s, w)
		}
	}
	q := drift.Assess(x[:100], nil, 10, 0.5, drift.FirstN(50))
	if q.Drifting || q.Change != -1 || q.Sentence("x", "", "", nil) != "x in control: no alarm" {
		t.Errorf("quiet series: %+v", q)
	}
}
