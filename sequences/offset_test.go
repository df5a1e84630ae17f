package sequences_test

import (
	"math"
	"testing"

	"padline/sequences"
)

// TestFixtureOffsetConditioning checks FixtureOffset.At against the
// conditional of a joint normal worked by hand (Rasmussen & Williams 2006,
// eqs. 2.23–2.24). One reference, weights w: prior variance k = s² + c²·w·w;
// the offset at w is k/(k + u²)·d with variance k − k²/(k + u²).
func TestFixtureOffsetConditioning(t *testing.T) {
	w := []float64{0.5, 1, 0, 1}
	o := sequences.FixtureOffset{StrayPriorPF: 0.3, CalPF: 0.05, Refs: []sequences.OffsetRef{
		{Serial: "R1", LabTripPF: 31.6, MeasuredPF: 31.4, UPF: 0.06, Weights: w},
	}}
	k := 0.09 + 0.0025*(0.25+1+1)
	d := 0.2
	want, wantU := k/(k+0.0036)*d, math.Sqrt(k-k*k/(k+0.0036))
	got, u, err := o.At(w)
	if err != nil || math.Abs(got-want) > 1e-12 || math.Abs(u-wantU) > 1e-12 {
		t.Errorf("At(w) = %.6f ± %.6f, %v; want %.6f ± %.6f", got, u, err, want, wantU)
	}
	// A trip on rungs no reference closes: the stray part is shared, the
	// rung's own error keeps its prior c².
	v := []float64{0, 0, 1, 0}
	kv := 0.09 // k(v, w): stray only
	want = kv / (k + 0.0036) * d
	wantU = math.Sqrt(0.09 + 0.0025 - kv*kv/(k+0.0036))
	got, u, _ = o.At(v)
	if math.Abs(got-want) > 1e-12 || math.Abs(u-wantU) > 1e-12 {
		t.Errorf("At(v) = %.6f ± %.6f; want %.6f ± %.6f", got, u, want, wantU)
	}
}

// TestFixtureOffsetRecovers: with exact references whose rung weights span
// the ladder, the offset at any trip is its true offset.
func TestFixtureOffsetRecovers(t *testing.T) {
	stray, rungs := 0.17, []float64{0.04, -0.06, 0.03}
	trueOff := func(w []float64) float64 {
		o := stray
		for r, x := range w {
			o += rungs[r] * x
		}
		return o
	}
	ws := [][]float64{{0, 0, 0}, {1, 0, 0}, {0, 1, 0}, {0, 0, 1}}
	o := sequences.FixtureOffset{StrayPriorPF: 0.3, CalPF: 0.05}
	for i, w := range ws {
		o.Refs = append(o.Refs, sequences.OffsetRef{Serial: string(rune('A' + i)), LabTripPF: 30 + trueOff(w), MeasuredPF: 30, UPF: 1e-6, Weights: w})
	}
	for _, w := range [][]float64{{0.5, 0.5, 0}, {1, 1, 1}, {0.2, 0, 0.9}} {
		got, u, err := o.At(w)
		if err != nil || math.Abs(got-trueOff(w)) > 1e-5 || u > 1e-4 {
			t.Errorf("w %v: %.6f ± %.6f (%v), true %.6f", w, got, u, err, trueOff(w))
		}
	}
}
