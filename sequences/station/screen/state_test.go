package screen_test

import (
	"fmt"
	"math"
	"strings"
	"testing"
	"time"

	"padline/sequences"
	"padline/sequences/station/screen"
)

func committed(id int64, serial string, v sequences.Verdict, code string, trip float64, first bool) screen.Committed {
	r := sequences.Run{Serial: serial, Verdict: v, FailCode: code}
	r.Measurements = []sequences.Measurement{{Step: "trip_search", Name: "trip_pf", Value: trip, Unit: "pF"}}
	return screen.Committed{RunID: id, Run: r, FirstTest: first, At: time.UnixMilli(1_700_000_000_000 + id)}
}

func reduceAll(es ...screen.Event) screen.State {
	var s screen.State
	for _, e := range es {
		s = screen.Reduce(s, e)
	}
	return s
}

func TestReduceStarted(t *testing.T) {
	s := reduceAll(screen.Started{Station: "L2-S1", Fixture: "FX-07", Variant: "QM-205", Simulated: true,
		Lot: "LOT-9", Operator: "ana", TripLowPF: 28, TripHighPF: 36})
	if s.Station != "L2-S1" || s.Fixture != "FX-07" || s.Variant != "QM-205" || !s.Simulated ||
		s.Lot != "LOT-9" || s.Operator != "ana" || s.TripLowPF != 28 || s.TripHighPF != 36 {
		t.Errorf("state %+v", s)
	}
	if s.Phase != screen.PhaseReady || s.Seq != 1 {
		t.Errorf("phase %q seq %d, want ready 1", s.Phase, s.Seq)
	}
}

func TestReduceScanned(t *testing.T) {
	s := reduceAll(screen.ScanRejected{Scan: "x", Reason: "bad"}, screen.Scanned{Serial: "QM205-000001"})
	if s.Phase != screen.PhaseTesting || s.Testing != "QM205-000001" || s.ScanRefused != nil {
		t.Errorf("state %+v", s)
	}
}

func TestReduceScanRejected(t *testing.T) {
	s := reduceAll(screen.Scanned{Serial: "QM205-000001"}, screen.ScanRejected{Scan: "QM205-000001", Reason: "lid never closed"})
	if s.ScanRefused == nil || s.ScanRefused.Reason != "lid never closed" || s.ScanRefused.Scan != "QM205-000001" {
		t.Fatalf("scan refused %+v", s.ScanRefused)
	}
	if s.Phase != screen.PhaseReady {
		t.Errorf("phase %q after a refused scan, want ready", s.Phase)
	}
}

func TestReduceRepeatScanned(t *testing.T) {
	s := reduceAll(screen.RepeatScanned{Serial: "QM205-000003", Tested: 1, Failed: 1})
	if s.Repeat == nil || *s.Repeat != (screen.Repeat{Serial: "QM205-000003", Tested: 1, Failed: 1}) {
		t.Fatalf("repeat %+v", s.Repeat)
	}
	if s = screen.Reduce(s, screen.Scanned{Serial: "QM205-000004"}); s.Repeat != nil {
		t.Error("the next scan leaves the repeat question open")
	}
}

func TestReduceCommitted(t *testing.T) {
	s := reduceAll(
		screen.Started{TripLowPF: 28, TripHighPF: 36},
		screen.CheckSchedule{UnitsLeft: 10},
		screen.Scanned{Serial: "A1"},
		committed(1, "A1", sequences.Pass, "", 31.5, true),
		committed(2, "A2", sequences.Fail, sequences.CodeTripHigh, 40, true),
		committed(3, "A3", sequences.StationFault, sequences.CodeLidOpen, math.NaN(), true),
		committed(4, "A2", sequences.Pass, "", 33, false),
	)
	if s.Phase != screen.PhaseReady || s.Testing != "" {
		t.Errorf("phase %q testing %q after commit", s.Phase, s.Testing)
	}
	if s.Last == nil || s.Last.RunID != 4 || s.Last.Serial != "A2" || s.Last.Verdict != sequences.Pass {
		t.Fatalf("last %+v", s.Last)
	}
	want := []string{"A2", "A3", "A2", "A1"}
	if len(s.Units) != len(want) {
		t.Fatalf("%d units, want %d", len(s.Units), len(want))
	}
	for i, w := range want {
		if s.Units[i].Serial != w {
			t.Errorf("unit %d is %s, want %s (newest first)", i, s.Units[i].Serial, w)
		}
	}
	fail := s.Units[2]
	adv, _ := sequences.Advice(sequences.CodeTripHigh)
	if fail.Do != adv.Do || fail.Means != adv.Means || fail.TripPF == nil || *fail.TripPF != 40 {
		t.Errorf("fail unit %+v", fail)
	}
	if fault := s.Units[1]; fault.TripPF != nil || fault.Do == "" {
		t.Errorf("station-fault unit %+v: want no trip point and the station advice", fault)
	}
	if s.Units[0].Do != "" {
		t.Errorf("a pass carries advice %q", s.Units[0].Do)
	}
	c := s.Counts
	// First-pass yield: A1 passed first time, A2 failed first time; A3's
	// station fault judged no unit and A2's retest is no first test: 1/2.
	if c.Pass != 2 || c.Fail != 1 || c.StationFault != 1 || c.FirstTests != 2 || c.FirstPasses != 1 ||
		c.FirstPassYield == nil || *c.FirstPassYield != 50 {
		t.Errorf("counts %+v", c)
	}
	// A station fault tested no unit: it does not use up the check's units.
	if s.Check.UnitsLeft == nil || *s.Check.UnitsLeft != 7 {
		t.Errorf("units left %v, want 7", s.Check.UnitsLeft)
	}
	if s.Units[0].CommittedMs != 1_700_000_000_004 {
		t.Errorf("committed ms %d", s.Units[0].CommittedMs)
	}
}

func TestReduceKeepsLast20(t *testing.T) {
	var s screen.State
	for i := 1; i <= 25; i++ {
		s = screen.Reduce(s, committed(int64(i), fmt.Sprintf("S%02d", i), sequences.Pass, "", 30, true))
	}
	if len(s.Units) != screen.RecentUnits || s.Units[0].Serial != "S25" || s.Units[19].Serial != "S06" {
		t.Errorf("%d units, first %s last %s", len(s.Units), s.Units[0].Serial, s.Units[len(s.Units)-1].Serial)
	}
	if s.Counts.Pass != 25 {
		t.Errorf("pass count %d, want 25 (counts are not cut to the list)", s.Counts.Pass)
	}
}

func TestReduceDoesNotChangeItsInput(t *testing.T) {
	s0 := reduceAll(screen.CheckSchedule{UnitsLeft: 5}, committed(1, "A1", sequences.Pass, "", 30, true))
	_ = screen.Reduce(s0, committed(2, "A2", sequences.Pass, "", 30, true))
	if *s0.Check.UnitsLeft != 4 || len(s0.Units) != 1 {
		t.Errorf("input changed: units left %d, %d units", *s0.Check.UnitsLeft, len(s0.Units))
	}
}

func TestReduceBadgeScanned(t *testing.T) {
	s := reduceAll(screen.BadgeScanned{Kind: "lot", Value: "L-77"}, screen.BadgeScanned{Kind: "operator", Value: "kim"})
	if s.Lot != "L-77" || s.Operator != "kim" || !strings.Contains(s.Notice, "kim") {
		t.Errorf("lot %q operator %q notice %q", s.Lot, s.Operator, s.Notice)
	}
}

func TestReduceStationRefused(t *testing.T) {
	s := reduceAll(screen.StationRefused{Why: "check older than 8 h", Fix: "run the shift-start check", CanCheck: true})
	if s.Phase != screen.PhaseRefused || s.Refusal == nil || !s.Refusal.CanCheck || !s.Check.Due ||
		s.Refusal.Why != "check older than 8 h" || s.Refusal.Fix != "run the shift-start check" {
		t.Errorf("state %+v refusal %+v", s, s.Refusal)
	}
}

func TestReduceCheckSchedule(t *testing.T) {
	due := time.Date(2026, 12, 2, 14, 0, 0, 0, time.UTC)
	s := reduceAll(screen.CheckSchedule{UnitsLeft: 1200, Due: due})
	if s.Check.UnitsLeft == nil || *s.Check.UnitsLeft != 1200 || s.Check.DueMs != due.UnixMilli() {
		t.Errorf("check %+v", s.Check)
	}
	s = screen.Reduce(s, screen.CheckSchedule{UnitsLeft: -1})
	if s.Check.UnitsLeft != nil || s.Check.DueMs != 0 {
		t.Errorf("no limits: check %+v", s.Check)
	}
}

func TestReduceCheckProgressAndFinished(t *testing.T) {
	s := reduceAll(screen.StationRefused{Why: "due", Fix: "check", CanCheck: true},
		screen.CheckProgress{Done: 1, Total: 3, Step: "QM205-REF-01"})
	if s.Phase != screen.PhaseChecking || s.Check.Done != 1 || s.Check.Total != 3 || s.Check.Step != "QM205-REF-01" {
		t.Fatalf("check %+v phase %q", s.Check, s.Phase)
	}
	ok := screen.Reduce(s, screen.CheckFinished{OK: true})
	if ok.Phase != screen.PhaseReady || ok.Refusal != nil || ok.Check.Due || ok.Check.Result != "passed" {
		t.Errorf("after a pass: phase %q refusal %+v check %+v", ok.Phase, ok.Refusal, ok.Check)
	}
	bad := screen.Reduce(s, screen.CheckFinished{OK: false, Detail: "rung 3 stuck open"})
	if bad.Phase != screen.PhaseRefused || bad.Refusal == nil || !bad.Refusal.CanCheck ||
		!strings.Contains(bad.Refusal.Why, "rung 3 stuck open") {
		t.Errorf("after a refusal: phase %q refusal %+v", bad.Phase, bad.Refusal)
	}
}

func TestReduceWarnings(t *testing.T) {
	s := reduceAll(
		screen.RelayWear{Rung: 3, Ops: 8.1e8, RatedOp: 1e9},
		screen.DriftAlarm{Rule: "ewma", Text: "trip point drifting up"},
		screen.RelayWear{Rung: 3, Ops: 8.5e8, RatedOp: 1e9},
	)
	if len(s.Warnings) != 2 {
		t.Fatalf("warnings %+v: a newer warning for the same rung replaces the older", s.Warnings)
	}
	if !strings.Contains(s.Warnings[1].Text, "85 %") || s.Warnings[0].Kind != "drift" {
		t.Errorf("warnings %+v", s.Warnings)
	}
}

func TestReduceIgnoresUnknown(t *testing.T) {
	s := reduceAll(struct{}{})
	if s.Seq != 0 {
		t.Errorf("seq %d after an unknown event", s.Seq)
	}
}

func nan() float64 { return math.NaN() }
