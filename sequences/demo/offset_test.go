package demo

import (
	"context"
	"math"
	"testing"

	"padline/sequences"
	"padline/sequences/session"
)

// TestShiftStartOffset: on 10 simulated fixtures (seeds 1–10, each its own
// stray and rung calibration errors at the realism floor), the fixture
// offset the shift-start check estimates from the reference units matches
// the fixture's true offset at the variant's nominal trip, taken the same
// way (each level's true − entered capacitance, weighted by the Fisher
// information one sample gives there, DEVELOPERS.md "Physics" 6), to
// 0.06 pF RMS; and its stated uncertainty covers the error (RMS(error/u)
// ≤ 1.1: the reference check states twice its searches' standard errors).
func TestShiftStartOffset(t *testing.T) {
	if testing.Short() {
		t.Skip("10 reference checks")
	}
	ctx := context.Background()
	v, err := session.LoadVariant("QM-205")
	if err != nil {
		t.Fatal(err)
	}
	const seeds = 10
	var e2, z2, raw2 float64
	for seed := uint64(1); seed <= seeds; seed++ {
		st, err := session.LoadStation("demo-sim")
		if err != nil {
			t.Fatal(err)
		}
		st.Sim.Seed = seed
		u, uFrom := session.StatedUncertainty(st)
		r, err := session.NewRig(v, st, session.RigOptions{UncertaintyPF: u, UncertaintyFrom: uFrom, Strategy: "bracket"})
		if err != nil {
			t.Fatal(err)
		}
		chk, err := shiftStartCheck(ctx, r, seed)
		if err != nil {
			t.Fatal(err)
		}
		if !chk.OK || chk.Offset == nil {
			t.Fatalf("seed %d: check ok %v, offset %v, faults %v", seed, chk.OK, chk.Offset, chk.Faults)
		}
		sigma := 0.6 / (2 * 1.2815515655446004)
		var num, den float64
		for _, l := range r.Plan.Levels() {
			z := (l.PF - r.Limits.Trip.Nominal) / sigma
			if math.Abs(z) > 8 {
				continue
			}
			f := sequences.ProbitWeight(z)
			num += f * (r.Line.TrueExternalPF(l.Pattern) - l.PF)
			den += f
		}
		truth := num / den
		est, uo, err := chk.Offset.At(r.NominalWeights())
		if err != nil {
			t.Fatal(err)
		}
		t.Logf("seed %d: offset %+.3f ± %.3f pF, true %+.3f pF", seed, est, uo, truth)
		e2 += (est - truth) * (est - truth)
		z2 += (est - truth) * (est - truth) / (uo * uo)
		raw2 += truth * truth
		r.Halt()
	}
	rms, rmsZ := math.Sqrt(e2/seeds), math.Sqrt(z2/seeds)
	t.Logf("offset error RMS %.3f pF (uncorrected %.3f pF), RMS(error/u) %.2f", rms, math.Sqrt(raw2/seeds), rmsZ)
	if rms > 0.06 || rmsZ > 1.1 {
		t.Errorf("offset error RMS %.3f pF (want ≤ 0.06), RMS(error/u) %.2f (want ≤ 1.1)", rms, rmsZ)
	}
}
