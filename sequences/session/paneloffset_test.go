package session_test

import (
	"context"
	"math"
	"testing"

	"padline/fixture"
	"padline/sequences"
	"padline/sequences/session"
)

// trueSiteOffset is what a trip found on site i's entered ladder near the
// variant's nominal trip lacks of the true capacitance at the pad, from the
// simulator's ground truth: each level's true − entered capacitance,
// weighted by the Fisher information one sample gives there (DEVELOPERS.md
// "Physics" 6, the weighting TestShiftStartOffset in sequences/demo uses
// for one station).
func trueSiteOffset(t *testing.T, r *session.PanelRig, i int) float64 {
	t.Helper()
	sr, err := r.SiteRig(i)
	if err != nil {
		t.Fatal(err)
	}
	sigma := 0.6 / (2 * 1.2815515655446004) // the variant's spread prior as a σ
	var num, den float64
	for _, l := range sr.Plan.Levels() {
		z := (l.PF - r.Limits.Trip.Nominal) / sigma
		if math.Abs(z) > 8 {
			continue
		}
		f := sequences.ProbitWeight(z)
		num += f * (r.Sim.Site(i).TrueExternalPF(l.Pattern) - l.PF)
		den += f
	}
	return num / den
}

// Each site of a panel has its own stray and its own capacitors, so the
// panel check estimates each site's fixture offset from that site's own
// reference measurements: on the demo panel, with lab trip points for its
// reference units (the simulator's true trips, lab_u_pf 0.02), every
// site's offset matches its true offset to 0.06 pF RMS over the sites, its
// stated uncertainty covers the error (RMS(error/u) ≤ 1.1), as the single
// station's check does (TestShiftStartOffset); the panel plan then adds
// each site's offset to that site's trip points, and a panel opened later
// takes them from the shift log.
func TestPanelCheckOffsetPerSite(t *testing.T) {
	if testing.Short() {
		t.Skip("a reference check on eight sites")
	}
	ctx := context.Background()
	r, db, hash := panelRig(t, "demo-panel")
	refs := r.Station.Trust.References
	for i := range refs {
		line := r.Sim.Site(0)
		if err := line.ForceDefects(refs[i].Serial, refs[i].SimDefects...); err != nil {
			t.Fatal(err)
		}
		refs[i].LabTripPF, refs[i].LabUPF = line.Draw(refs[i].Serial).Truth().TripPF, 0.02
	}
	rep, err := session.RunPanelCheck(ctx, r, db, nil)
	if err != nil {
		t.Fatal(err)
	}
	if !rep.OK || len(rep.Sites) != r.Sites() || rep.Offset != nil {
		t.Fatalf("check ok %v, %d sites, station-wide offset %v; faults %q", rep.OK, len(rep.Sites), rep.Offset, rep.Faults)
	}
	var e2, z2, raw2 float64
	for i, sc := range rep.Sites {
		if sc.Site != i+1 || sc.Offset == nil || sc.OffsetPF == nil || sc.OffsetU == nil || len(sc.References) != len(refs) {
			t.Fatalf("site %d: %+v", i+1, sc)
		}
		truth := trueSiteOffset(t, r, i)
		est, u := *sc.OffsetPF, *sc.OffsetU
		t.Logf("site %d: offset %+.3f ± %.3f pF, true %+.3f pF", i+1, est, u, truth)
		e2 += (est - truth) * (est - truth)
		z2 += (est - truth) * (est - truth) / (u * u)
		raw2 += truth * truth
	}
	n := float64(len(rep.Sites))
	rms, rmsZ := math.Sqrt(e2/n), math.Sqrt(z2/n)
	t.Logf("offset error RMS %.3f pF (uncorrected %.3f pF), RMS(error/u) %.2f", rms, math.Sqrt(raw2/n), rmsZ)
	if rms > 0.06 || rmsZ > 1.1 {
		t.Errorf("offset error RMS %.3f pF (want ≤ 0.06), RMS(error/u) %.2f (want ≤ 1.1)", rms, rmsZ)
	}

	// The panel plan corrects each site's trip by that site's offset.
	offs := r.Plan.Offsets()
	if len(offs) != r.Sites() {
		t.Fatalf("panel plan holds %d offsets", len(offs))
	}
	serials, err := session.PanelSerials(r.Variant, r.Sites(), "QM205-0003", nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := r.Sim.Load(serials); err != nil {
		t.Fatal(err)
	}
	tmpl := sequences.Run{Variant: "QM-205", ConfigHash: hash, Station: r.Station.Name, Fixture: r.Station.Fixture, Operator: "t"}
	oc, err := r.TestPanel(ctx, db, tmpl, "QM205-0003", serials, nil, nil)
	r.Sim.Unload()
	if err != nil {
		t.Fatal(err)
	}
	for i, run := range oc.Runs {
		m := map[sequences.Quantity]float64{}
		for _, x := range run.Measurements {
			if x.Step == sequences.StepTripSearch {
				m[x.Name] = x.Value
			}
		}
		off, okOff := m[sequences.MeasFixtureOffPF]
		ladder, okLadder := m[sequences.MeasTripLadderPF]
		trip := m[sequences.MeasTripPF]
		if !okOff || !okLadder || math.Abs(trip-(ladder+off)) > 1e-9 {
			t.Fatalf("site %d: trip %.4f, as found %.4f (%v), offset %.4f (%v): want trip = found + offset", i+1, trip, ladder, okLadder, off, okOff)
		}
		if want, _, err := offs[i].At(sequences.TripRungWeights(levelsOf(r, i), 8, ladder, oc.Trial.Trips[i].SigmaPF)); err != nil || math.Abs(off-want) > 1e-9 {
			t.Errorf("site %d: offset %.4f pF, site's own offset there %.4f (%v)", i+1, off, want, err)
		}
	}

	// A panel rig opened later takes each site's offset from the log.
	r2, _, _ := panelRig(t, "demo-panel")
	got, err := session.PanelOffsetsFromLog(ctx, db, r2)
	if err != nil || len(got) != r.Sites() {
		t.Fatalf("offsets from the log: %d, %v", len(got), err)
	}
	for i := range got {
		a, _, _ := got[i].At(make([]float64, 8))
		b, _, _ := offs[i].At(make([]float64, 8))
		if a != b {
			t.Errorf("site %d: offset from the log %.4f, from the check %.4f", i+1, a, b)
		}
	}
}

// levelsOf is the panel plan's level list of site i: its own ladder's, or
// on a ganged ladder the patterns every site shares (NewPanelRig).
func levelsOf(r *session.PanelRig, i int) []sequences.Level {
	if r.Station.Sites.Ganged {
		return fixture.GangedLevels(r.Ladders)[i]
	}
	return r.Ladders[i].Distinct()
}
