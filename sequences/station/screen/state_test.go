package screen_test

import (
	"fmt"
	"math"
	"strings"
	"testing"
	"time"

	"padline/sequences"
	"padline/sequences/session"
	"padline/sequences/station/screen"
)

var t0 = time.UnixMilli(1_790_000_000_000)

// verdict is a verdict_committed event.
func verdict(id int64, serial string, v sequences.Verdict, code sequences.FailCode, trip float64, priorFails int) session.Event {
	return verdictAfter(id, serial, v, code, trip, priorFails, 0)
}

// verdictAfter is a verdict_committed event of a serial with earlier
// fails and passes.
func verdictAfter(id int64, serial string, v sequences.Verdict, code sequences.FailCode, trip float64, priorFails, priorPasses int) session.Event {
	r := sequences.Run{Serial: serial, Verdict: v, FailCode: code}
	r.Measurements = []sequences.Measurement{{Step: "trip_search", Name: sequences.MeasTripPF, Value: trip, Unit: "pF"}}
	return session.Event{Kind: session.KindVerdictCommitted, Time: t0.Add(time.Duration(id) * time.Millisecond),
		Verdict: &session.Verdict{Run: r, ID: id, PriorFails: priorFails, PriorPasses: priorPasses, Action: sequences.FailAction(code)}}
}

func reduceAll(es ...screen.Event) screen.State {
	var s screen.State
	for _, e := range es {
		s = screen.Reduce(s, e)
	}
	return s
}

func TestReduceSessionStarted(t *testing.T) {
	s := reduceAll(session.Event{Kind: session.KindSessionStarted, Started: &session.Started{
		Station: "L2-S1", Fixture: "FX-07", Variant: "QM-205", Simulated: true, Lot: "LOT-9", Operator: "ana",
		Limits: sequences.Limits{TripLowPF: 28, TripHighPF: 36}}})
	if s.Station != "L2-S1" || s.Fixture != "FX-07" || s.Variant != "QM-205" || !s.Simulated ||
		s.Lot != "LOT-9" || s.Operator != "ana" || s.TripLowPF != 28 || s.TripHighPF != 36 {
		t.Errorf("state %+v", s)
	}
	if s.Phase != screen.PhaseReady || s.Seq != 1 {
		t.Errorf("phase %q seq %d, want ready 1", s.Phase, s.Seq)
	}
}

func scanned(serial string) session.Event {
	return session.Event{Kind: session.KindUnitScanned, Scan: &session.Scan{Serial: serial}}
}

func TestReduceUnitScanned(t *testing.T) {
	s := reduceAll(session.Event{Kind: session.KindScanRefused, ScanRefused: &session.ScanRefusal{Raw: "x", Reason: "bad"}},
		scanned("QM205-000001"))
	if s.Phase != screen.PhaseTesting || s.Testing != "QM205-000001" || s.ScanRefused != nil {
		t.Errorf("state %+v", s)
	}
}

func TestReduceLidWait(t *testing.T) {
	s := reduceAll(scanned("QM205-000001"), session.Event{Kind: session.KindLidWait, Scan: &session.Scan{Serial: "QM205-000001"}})
	if !strings.Contains(s.Notice, "close the lid") || s.Phase != screen.PhaseTesting {
		t.Errorf("notice %q phase %q", s.Notice, s.Phase)
	}
}

func TestReduceScanRefused(t *testing.T) {
	s := reduceAll(scanned("QM205-000001"),
		session.Event{Kind: session.KindScanRefused, ScanRefused: &session.ScanRefusal{Raw: "QM205-000001", Reason: "lid never closed"}})
	if s.ScanRefused == nil || s.ScanRefused.Reason != "lid never closed" || s.ScanRefused.Scan != "QM205-000001" {
		t.Fatalf("scan refused %+v", s.ScanRefused)
	}
	if s.Phase != screen.PhaseReady {
		t.Errorf("phase %q after a refused scan, want ready", s.Phase)
	}
}

func TestReduceRepeat(t *testing.T) {
	s := reduceAll(screen.RepeatScanned{Serial: "QM205-000003", Tested: 1, Failed: 1})
	if s.Repeat == nil || *s.Repeat != (screen.Repeat{Serial: "QM205-000003", Tested: 1, Failed: 1}) {
		t.Fatalf("repeat %+v", s.Repeat)
	}
	if c := screen.Reduce(s, screen.RepeatCleared{}); c.Repeat != nil || c.Seq != s.Seq+1 {
		t.Errorf("cleared: repeat %+v seq %d", c.Repeat, c.Seq)
	}
	if c := screen.Reduce(s, scanned("QM205-000004")); c.Repeat != nil {
		t.Error("the next unit leaves the repeat question open")
	}
	if c := reduceAll(screen.RepeatCleared{}); c.Seq != 0 {
		t.Error("clearing no repeat counts as a change")
	}
}

func TestReduceVerdictCommitted(t *testing.T) {
	s := reduceAll(
		session.Event{Kind: session.KindSessionStarted, Started: &session.Started{Limits: sequences.Limits{TripLowPF: 28, TripHighPF: 36}}},
		scanned("A1"),
		verdict(1, "A1", sequences.Pass, "", 31.5, 0),
		verdict(2, "A2", sequences.Fail, sequences.CodeTripHigh, 40, 0),
		verdict(3, "A3", sequences.StationFault, sequences.CodeLidOpen, math.NaN(), 0),
		verdict(4, "A2", sequences.Pass, "", 33, 1),
		verdict(5, "A5", sequences.Fail, sequences.CodeNoTrip, math.NaN(), 0),
		// A1 again, a repeat of a pass: tested, but no first test.
		verdictAfter(6, "A1", sequences.Pass, "", 31.4, 0, 1),
	)
	if s.Phase != screen.PhaseReady || s.Testing != "" {
		t.Errorf("phase %q testing %q after commit", s.Phase, s.Testing)
	}
	if s.Last == nil || s.Last.RunID != 6 || s.Last.Serial != "A1" || s.Last.Verdict != sequences.Pass {
		t.Fatalf("last %+v", s.Last)
	}
	want := []string{"A1", "A5", "A2", "A3", "A2", "A1"}
	if len(s.Units) != len(want) {
		t.Fatalf("%d units, want %d", len(s.Units), len(want))
	}
	for i, w := range want {
		if s.Units[i].Serial != w {
			t.Errorf("unit %d is %s, want %s (newest first)", i, s.Units[i].Serial, w)
		}
	}
	fail := s.Units[4]
	adv, _ := sequences.Advice(sequences.CodeTripHigh)
	if fail.Do != adv.Do || fail.Means != adv.Means || fail.TripPF == nil || *fail.TripPF != 40 {
		t.Errorf("fail unit %+v", fail)
	}
	if fault := s.Units[3]; fault.TripPF != nil || fault.Do == "" {
		t.Errorf("station-fault unit %+v: want no trip point and the station advice", fault)
	}
	if s.Units[2].Do != "" || s.Units[2].PriorFails != 1 {
		t.Errorf("a pass after fail %+v", s.Units[2])
	}
	c := s.Counts
	// First-pass yield: A1 passed first time, A2 and A5 failed first time;
	// A3's station fault judged no unit, and neither A2's retest nor A1's
	// repeat is a first test.
	if c.Pass != 3 || c.Fail != 2 || c.StationFault != 1 || c.FirstTests != 3 || c.FirstPasses != 1 ||
		c.FirstPassYield == nil || math.Abs(*c.FirstPassYield-100.0/3) > 1e-9 {
		t.Errorf("counts %+v", c)
	}
	if s.Units[0].CommittedMs != t0.UnixMilli()+6 {
		t.Errorf("committed ms %d, want the event's time", s.Units[0].CommittedMs)
	}
}

func TestReduceKeepsLast20(t *testing.T) {
	var s screen.State
	for i := 1; i <= 25; i++ {
		s = screen.Reduce(s, verdict(int64(i), fmt.Sprintf("S%02d", i), sequences.Pass, "", 30, 0))
	}
	if len(s.Units) != screen.RecentUnits || s.Units[0].Serial != "S25" || s.Units[19].Serial != "S06" {
		t.Errorf("%d units, first %s last %s", len(s.Units), s.Units[0].Serial, s.Units[len(s.Units)-1].Serial)
	}
	if s.Counts.Pass != 25 {
		t.Errorf("pass count %d, want 25 (counts are not cut to the list)", s.Counts.Pass)
	}
}

func TestReduceDoesNotChangeItsInput(t *testing.T) {
	s0 := reduceAll(screen.Schedule{UnitsLeft: 5}, verdict(1, "A1", sequences.Pass, "", 30, 0))
	_ = screen.Reduce(s0, verdict(2, "A2", sequences.Pass, "", 30, 0))
	_ = screen.Reduce(s0, screen.Schedule{UnitsLeft: 3})
	if *s0.Check.UnitsLeft != 5 || len(s0.Units) != 1 {
		t.Errorf("input changed: units left %d, %d units", *s0.Check.UnitsLeft, len(s0.Units))
	}
}

func TestReduceBadgeScanned(t *testing.T) {
	s := reduceAll(
		session.Event{Kind: session.KindBadgeScanned, Badge: &session.Badge{Kind: session.BadgeLot, Value: "L-77"}},
		session.Event{Kind: session.KindBadgeScanned, Badge: &session.Badge{Kind: session.BadgeOperator, Value: "kim"}})
	if s.Lot != "L-77" || s.Operator != "kim" || !strings.Contains(s.Notice, "kim") {
		t.Errorf("lot %q operator %q notice %q", s.Lot, s.Operator, s.Notice)
	}
}

func refused(kind session.Kind) session.Event {
	return session.Event{Kind: kind, Refused: &session.Refusal{Why: "the reference check of 2026-12-02 06:02 is older than 8 h",
		Fix: "run 'padline station check --variant QM-205 --station demo-sim --db shift.db'"}}
}

func TestReduceStationRefused(t *testing.T) {
	s := reduceAll(refused(session.KindStationRefused))
	if s.Phase != screen.PhaseRefused || s.Refusal == nil || s.Refusal.CanCheck || s.Check.Due ||
		!strings.Contains(s.Refusal.Why, "older than 8 h") || !strings.Contains(s.Refusal.Fix, "padline station check") {
		t.Errorf("state %+v refusal %+v", s, s.Refusal)
	}
}

// A session that waits for the check offers it on the screen.
func TestReduceCheckDue(t *testing.T) {
	s := reduceAll(refused(session.KindStationRefused), refused(session.KindCheckDue))
	if s.Phase != screen.PhaseRefused || s.Refusal == nil || !s.Refusal.CanCheck || !s.Check.Due ||
		!strings.Contains(s.Refusal.Why, "older than 8 h") || !strings.Contains(s.Refusal.Fix, "button") {
		t.Errorf("state %+v refusal %+v", s, s.Refusal)
	}
}

func TestReduceSchedule(t *testing.T) {
	due := time.Date(2026, 12, 2, 14, 0, 0, 0, time.UTC)
	s := reduceAll(screen.Schedule{UnitsLeft: 1200, Due: due})
	if s.Check.UnitsLeft == nil || *s.Check.UnitsLeft != 1200 || s.Check.DueMs != due.UnixMilli() {
		t.Errorf("check %+v", s.Check)
	}
	s = screen.Reduce(s, screen.Schedule{UnitsLeft: -1})
	if s.Check.UnitsLeft != nil || s.Check.DueMs != 0 {
		t.Errorf("no limits: check %+v", s.Check)
	}
}

func progress(msg, serial string) session.Event {
	return session.Event{Kind: session.KindCheckProgress, Check: &session.CheckInfo{Message: msg, Serial: serial}}
}

func TestReduceCheckProgressAndResult(t *testing.T) {
	s := reduceAll(screen.StationInfo{References: 3}, refused(session.KindCheckDue),
		progress("load reference unit QM205-REF-01", ""),
		progress("reference unit QM205-REF-01 measured", "QM205-REF-01"),
		progress("load reference unit QM205-REF-36", ""))
	if s.Phase != screen.PhaseChecking || s.Check.Done != 1 || s.Check.Total != 3 || !strings.Contains(s.Check.Step, "REF-36") {
		t.Fatalf("check %+v phase %q", s.Check, s.Phase)
	}
	result := func(ok bool, faults ...string) session.Event {
		return session.Event{Kind: session.KindCheckResult, Check: &session.CheckInfo{Report: &session.CheckReport{OK: ok, Faults: faults, Time: t0}}}
	}
	ok := screen.Reduce(s, result(true))
	if ok.Phase != screen.PhaseReady || ok.Refusal != nil || ok.Check.Due || !strings.HasPrefix(ok.Check.Result, "passed") {
		t.Errorf("after a pass: phase %q refusal %+v check %+v", ok.Phase, ok.Refusal, ok.Check)
	}
	bad := screen.Reduce(s, result(false, "rung 3 stuck open"))
	if bad.Phase != screen.PhaseRefused || bad.Refusal == nil || !strings.Contains(bad.Refusal.Why, "rung 3 stuck open") {
		t.Errorf("after a refusal: phase %q refusal %+v", bad.Phase, bad.Refusal)
	}
	// The session then waits for another check; what the check found stays.
	bad = screen.Reduce(bad, refused(session.KindCheckDue))
	if !bad.Refusal.CanCheck || len(bad.Check.Faults) != 1 || bad.Check.Faults[0] != "rung 3 stuck open" {
		t.Errorf("check due after a refused check: refusal %+v faults %q", bad.Refusal, bad.Check.Faults)
	}
	if ok := screen.Reduce(bad, result(true)); len(ok.Check.Faults) != 0 {
		t.Errorf("faults %q after a passed check", ok.Check.Faults)
	}
	// A second check counts from zero again.
	again := screen.Reduce(bad, progress("load reference unit QM205-REF-01", ""))
	if again.Check.Done != 0 {
		t.Errorf("second check starts at %d done", again.Check.Done)
	}
}

func TestReduceWarnings(t *testing.T) {
	s := reduceAll(
		session.Event{Kind: session.KindRelayWear, Wear: &session.RelayWear{Rung: 3, Operations: 810_000_000, Rated: 1e9, Fraction: 0.81}},
		session.Event{Kind: session.KindDriftAlarm, Drift: &session.DriftAlarm{Rule: "ewma", Message: "trip point drifting up"}},
		session.Event{Kind: session.KindRelayWear, Wear: &session.RelayWear{Rung: 3, Operations: 850_000_000, Rated: 1e9, Fraction: 0.85}},
	)
	if len(s.Warnings) != 2 {
		t.Fatalf("warnings %+v: a newer warning for the same rung replaces the older", s.Warnings)
	}
	if !strings.Contains(s.Warnings[1].Text, "85 %") || !strings.Contains(s.Warnings[1].Text, "850,000,000 operations") || s.Warnings[0].Kind != "drift" || s.Warnings[0].Text != "trip point drifting up" {
		t.Errorf("warnings %+v", s.Warnings)
	}
}

func TestReduceUnitAbortedAndEnded(t *testing.T) {
	s := reduceAll(scanned("A1"), session.Event{Kind: session.KindUnitAborted, Scan: &session.Scan{Serial: "A1"}})
	if s.Phase != screen.PhaseReady || !strings.Contains(s.Notice, "nothing logged") {
		t.Errorf("aborted: phase %q notice %q", s.Phase, s.Notice)
	}
	s = screen.Reduce(s, session.Event{Kind: session.KindSessionEnded, Ended: &session.Ended{Tested: 4, Reason: session.EndStopped}})
	if s.Phase != screen.PhaseEnded || !strings.Contains(s.Notice, "4 unit") {
		t.Errorf("ended: phase %q notice %q", s.Phase, s.Notice)
	}
}

func TestReduceIgnoresUnknown(t *testing.T) {
	s := reduceAll(struct{}{}, session.Event{Kind: session.KindStepFinished, Step: &session.StepDone{}}, session.Event{Kind: session.KindVerdictCommitted})
	if s.Seq != 0 {
		t.Errorf("seq %d after events the screen does not show", s.Seq)
	}
}

func nan() float64 { return math.NaN() }
