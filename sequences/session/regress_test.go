package session_test

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"periph.io/x/conn/v3/gpio"

	"padline/fixture"
	"padline/fixture/sim"
	"padline/sequences"
	"padline/sequences/session"
	"padline/sequences/timing"
	"padline/store"
)

// failHigh is a power pin whose driver fails to switch the unit on.
type failHigh struct{ gpio.PinOut }

func (p failHigh) Out(l gpio.Level) error {
	if l == gpio.High {
		return errors.New("write failed")
	}
	return p.PinOut.Out(l)
}

// A station fault's message (the PinError naming the pin) reaches the
// verdict event and is stored with the run.
func TestStationFaultMessageKept(t *testing.T) {
	ctx := context.Background()
	s := openDemoPins(t, checkedLog(t), func(p *fixture.Pins) { p.Power = failHigh{p.Power} })
	defer s.Close()
	ch, _ := s.Subscribe(256)
	if err := s.Run(ctx, session.OneSerial("QM205-000010")); err != nil {
		t.Fatal(err)
	}
	var got *session.Verdict
	for len(ch) > 0 {
		if e := <-ch; e.Kind == session.KindVerdictCommitted {
			got = e.Verdict
		}
	}
	if got == nil || got.Run.Verdict != sequences.StationFault || got.Run.FailCode != sequences.CodePinError {
		t.Fatalf("verdict %+v", got)
	}
	if !strings.Contains(got.StationError, "power") || !strings.Contains(got.StationError, "write failed") {
		t.Errorf("station error %q does not name the pin and its failure", got.StationError)
	}
	for e, err := range s.DB().Runs(ctx, store.Filter{Serial: "QM205-000010"}) {
		if err != nil {
			t.Fatal(err)
		}
		if e.Fault != got.StationError {
			t.Errorf("stored fault %q, want %q", e.Fault, got.StationError)
		}
	}
}

// Relay counts the log holds for another ladder are an error, not a
// silent reset to zero.
func TestRelayWearMismatchIsAnError(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "shift.db")
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := db.SaveRelayOps(ctx, "FX-07", []uint64{10, 20, 30}); err != nil {
		t.Fatal(err)
	}
	db.Close()
	_, err = session.Open(ctx, session.Options{Variant: "QM-205", Station: "demo-sim", ShiftLog: path})
	if err == nil || !strings.Contains(err.Error(), "relay wear of fixture FX-07") {
		t.Fatalf("Open = %v, want a relay wear error", err)
	}
}

// Relay counts survive a session: saved on close, restored on open.
func TestRelayWearCarriesOver(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "shift.db")
	s := openDemo(t, session.Options{ShiftLog: path})
	if _, err := s.Check(ctx); err != nil {
		t.Fatal(err)
	}
	ops := s.Rig().Fixture.RelayOps()
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	again := openDemo(t, session.Options{ShiftLog: path})
	got := again.Rig().Fixture.RelayOps()
	for i := range ops {
		if got[i] != ops[i] || ops[i] == 0 {
			t.Fatalf("rung %d: %d after reopen, %d before", i, got[i], ops[i])
		}
	}
}

// Only "no log" and "no study" fall back to the stated uncertainty.
func TestUncertaintyFallsBackOnlyWhenNotFound(t *testing.T) {
	ctx := context.Background()
	st, err := session.LoadStation("demo-sim")
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	u, from, err := session.Uncertainty(ctx, filepath.Join(dir, "none.db"), st)
	if wantU, wantFrom := session.StatedUncertainty(st); err != nil || u != wantU || from != wantFrom {
		t.Errorf("no log: %g %q %v", u, from, err)
	}
	if _, err := os.Stat(filepath.Join(dir, "none.db")); !os.IsNotExist(err) {
		t.Error("the look-up created a shift log")
	}
	bad := filepath.Join(dir, "notes.db")
	if err := os.WriteFile(bad, []byte("these are my notes, not a shift log\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	if _, _, err := session.Uncertainty(ctx, bad, st); err == nil || !strings.Contains(err.Error(), bad) {
		t.Errorf("a file that is not a shift log: err %v, want one naming it", err)
	}
}

// The simulator draws each toleranced value from the variant's own
// distribution, not always a clipped normal.
func TestSimulatorHonoursVariantDistribution(t *testing.T) {
	v, st, err := session.Load("QM-205", "demo-sim")
	if err != nil {
		t.Fatal(err)
	}
	c := &v.Circuit
	c.SenseROhm = timing.Value{Min: 90e3, Typ: 100e3, Max: 110e3, Dist: timing.Uniform}
	c.PadPF = timing.Value{Min: 8, Typ: 9, Max: 12, Dist: timing.Triangular}
	c.InputPF = timing.Range(4, 5, 8) // off-centre typ: a split normal
	um := session.UnitModel(v, st.Sim)
	if um.SenseR.Shape != sim.Uniform || um.SenseR.Min != 90e3 || um.SenseR.Max != 110e3 {
		t.Errorf("uniform sense resistor became %+v", um.SenseR)
	}
	if um.PadPF.Shape != sim.Triangular || um.PadPF.Mean != 9 {
		t.Errorf("triangular pad became %+v", um.PadPF)
	}
	if um.InputPF.Shape != sim.Normal || um.InputPF.SD != 1.0/3 || um.InputPF.SDHigh != 1 {
		t.Errorf("min/typ/max 4/5/8 became %+v, want split normal σ 1/3 below, 1 above", um.InputPF)
	}
}
