package session_test

import (
	"context"
	"slices"
	"testing"

	"padline/sequences"
	"padline/sequences/session"
	"padline/sequences/timing"
)

// Reopen starts a simulated rig anew over the same limits: after two units
// on the first rig, the first unit on the reopened one reads as it did on
// the first rig (same trip point, fixture time and relay operations: the
// line, its clock and the relay counts start again), the first rig is left
// as it was, and a rig that is not simulated is refused.
func TestRigReopen(t *testing.T) {
	r, err := session.OpenRig(context.Background(), "QM-205", "demo-sim", "", session.RigOptions{})
	if err != nil {
		t.Fatal(err)
	}
	type unit struct {
		tripPF float64
		fixMS  int64
		ops    []uint64
	}
	test := func(r *session.Rig, serial string) unit {
		t.Helper()
		sess := &sequences.Session{Plan: r.Plan, Station: r.Fixture, Clock: r.Clock, Recorder: nopRecorder{}}
		r.Line.Load(serial)
		oc, err := sess.Test(context.Background(), serial)
		r.Line.Unload()
		if oc == nil || oc.Trial.Trip == nil {
			t.Fatalf("%s: outcome %v, error %v", serial, oc, err)
		}
		return unit{oc.Trial.Trip.TripPF, oc.Run.Finished.Sub(oc.Run.Started).Microseconds(), r.Fixture.RelayOps()}
	}
	first := test(r, "QM205-000001")
	test(r, "QM205-000002")
	opsBefore := r.Fixture.RelayOps()
	n, err := r.Reopen()
	if err != nil {
		t.Fatal(err)
	}
	if n.Line == r.Line || n.Fixture == r.Fixture || n.Plan == r.Plan {
		t.Fatal("the reopened rig shares the line, fixture or plan")
	}
	if n.Limits.Trip != r.Limits.Trip || n.PlanConfig.RelaySettle != r.PlanConfig.RelaySettle || n.UncertaintyPF != r.UncertaintyPF {
		t.Errorf("reopened limits %+v settle %v U %v, want %+v %v %v", n.Limits.Trip, n.PlanConfig.RelaySettle, n.UncertaintyPF,
			r.Limits.Trip, r.PlanConfig.RelaySettle, r.UncertaintyPF)
	}
	again := test(n, "QM205-000001")
	if again.tripPF != first.tripPF || again.fixMS != first.fixMS || !slices.Equal(again.ops, first.ops) {
		t.Errorf("first unit on the reopened rig %+v, on the first rig %+v", again, first)
	}
	if got := r.Fixture.RelayOps(); !slices.Equal(got, opsBefore) {
		t.Errorf("the first rig's relay counts moved from %v to %v", opsBefore, got)
	}
	gpioRig := *r
	gpioRig.Line = nil
	if _, err := gpioRig.Reopen(); err == nil {
		t.Error("a rig on real pins was reopened")
	}
}

// nopRecorder keeps no runs.
type nopRecorder struct{}

func (nopRecorder) Record(context.Context, *sequences.Run) (int64, error) { return 0, nil }

// A rig tests by the limits 'padline limits' prints with its default draws
// and seed (README "Commands": the model limits and the test limits) for
// the same guard band, and so do the limits versions the shift log keeps
// (CurrentLimits): all take them from Variant.StationLimits.
func TestRigLimitsArePrintedLimits(t *testing.T) {
	r, err := session.OpenRig(context.Background(), "QM-205", "demo-sim", "", session.RigOptions{UncertaintyPF: 0.4, UncertaintyFrom: "test"})
	if err != nil {
		t.Fatal(err)
	}
	lr, err := session.VariantLimits(context.Background(), session.LimitsQuery{Variant: "QM-205", UncertaintyPF: 0.4, UncertaintyGiven: true,
		Draws: timing.DefaultDraws, Seed: 1})
	if err != nil {
		t.Fatal(err)
	}
	pl := r.PlanConfig.Limits
	if r.Limits.TestLimits != lr.TestLimits || r.Limits.Trip != lr.Trip || pl.TripLowPF != lr.TestLimits.Low || pl.TripHighPF != lr.TestLimits.High {
		t.Errorf("rig limits %+v (trip %+v, plan %+v), 'padline limits' %+v (trip %+v)", r.Limits.TestLimits, r.Limits.Trip, pl, lr.TestLimits, lr.Trip)
	}
}
