package session_test

import (
	"context"
	"errors"
	"path/filepath"
	"testing"
	"time"

	"padline/fixture"
	"padline/sequences"
	"padline/sequences/session"
)

// openDemo opens a session on the built-in demo variant and simulated
// station over a fresh shift log.
func openDemo(t *testing.T, o session.Options) *session.Session {
	t.Helper()
	o.Variant, o.Station = "QM-205", "demo-sim"
	if o.ShiftLog == "" {
		o.ShiftLog = filepath.Join(t.TempDir(), "shift.db")
	}
	s, err := session.Open(context.Background(), o)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = s.Close() })
	return s
}

// checkedLog is a fresh shift log on which a demo session has passed its
// shift-start check, so that a session opened on it next tests units.
func checkedLog(t *testing.T) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "shift.db")
	healthy := openDemo(t, session.Options{ShiftLog: path})
	if rep, err := healthy.Check(context.Background()); err != nil || !rep.OK {
		t.Fatalf("check %v %v", rep.Faults, err)
	}
	if err := healthy.Close(); err != nil {
		t.Fatal(err)
	}
	return path
}

// openDemoPins is openDemo on the shift log at path over a rig whose
// simulated pins fault changes before the fixture is built on them.
func openDemoPins(t *testing.T, path string, fault func(*fixture.Pins)) *session.Session {
	t.Helper()
	r, err := session.OpenRig(context.Background(), "QM-205", "demo-sim", "", session.RigOptions{})
	if err != nil {
		t.Fatal(err)
	}
	pins := r.Line.Pins()
	fault(&pins)
	if r.Fixture, err = session.NewFixture(r.Station, pins, r.Clock); err != nil {
		t.Fatal(err)
	}
	s, err := session.OpenOn(context.Background(), r, session.Options{ShiftLog: path})
	if err != nil {
		t.Fatal(err)
	}
	return s
}

// collect drains events until the channel closes.
func collect(ch <-chan session.Event) <-chan []session.Event {
	out := make(chan []session.Event, 1)
	go func() {
		var es []session.Event
		for e := range ch {
			es = append(es, e)
		}
		out <- es
	}()
	return out
}

func kinds(es []session.Event) map[session.Kind]int {
	m := map[session.Kind]int{}
	for _, e := range es {
		m[e.Kind]++
	}
	return m
}

func TestGateRefusesWithoutCheck(t *testing.T) {
	s := openDemo(t, session.Options{})
	ch, _ := s.Subscribe(64)
	got := collect(ch)
	err := s.Run(context.Background(), session.OneSerial("QM205-000001"))
	if !errors.Is(err, session.ErrNotReady) {
		t.Fatalf("Run = %v, want ErrNotReady", err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	es := <-got
	k := kinds(es)
	if k[session.KindStationRefused] != 1 || k[session.KindUnitScanned] != 0 || k[session.KindVerdictCommitted] != 0 {
		t.Fatalf("events %v", k)
	}
	if es[0].Kind != session.KindSessionStarted || es[len(es)-1].Kind != session.KindSessionEnded {
		t.Fatalf("first %s last %s", es[0].Kind, es[len(es)-1].Kind)
	}
	if !es[0].Started.Simulated || es[0].Started.Driver != session.DriverSim {
		t.Errorf("started %+v: a sim station must say it is simulated", es[0].Started)
	}
	if s.Rig().Line.Powered() {
		t.Error("unit power left on after Close")
	}
}

func TestLoopEventsInOrder(t *testing.T) {
	s := openDemo(t, session.Options{Operator: "op", Lot: "L1"})
	if rep, err := s.Check(context.Background()); err != nil || !rep.OK {
		t.Fatalf("check %+v %v", rep, err)
	}
	ch, _ := s.Subscribe(1024)
	got := collect(ch)
	serials := make(chan string, 4)
	serials <- "QM205-000001"
	serials <- "not a serial"
	serials <- "QM205-000002"
	close(serials)
	if err := s.Run(context.Background(), session.ChanScanner(serials)); err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	es := <-got
	for i, e := range es {
		if e.Seq != es[0].Seq+uint64(i) {
			t.Fatalf("event %d has seq %d after %d: gap without a slow consumer", i, e.Seq, es[0].Seq)
		}
	}
	k := kinds(es)
	if k[session.KindVerdictCommitted] != 2 || k[session.KindScanRefused] != 1 || k[session.KindUnitScanned] != 2 {
		t.Fatalf("events %v", k)
	}
	// Steps come before their unit's verdict, and the verdict carries the
	// committed run's id.
	steps := 0
	for _, e := range es {
		switch e.Kind {
		case session.KindStepFinished:
			steps++
		case session.KindVerdictCommitted:
			if steps < 4 {
				t.Errorf("verdict after %d steps", steps)
			}
			if e.Verdict.ID <= 0 || e.Verdict.Run.Operator != "op" || e.Verdict.Run.Lot != "L1" {
				t.Errorf("verdict %+v", e.Verdict)
			}
			steps = 0
		}
	}
	end := es[len(es)-1]
	if end.Kind != session.KindSessionEnded || end.Ended.Tested != 2 || end.Ended.Reason != session.EndInput {
		t.Errorf("end %+v", end.Ended)
	}
}

func TestSlowConsumerDropsAndDoesNotBlock(t *testing.T) {
	s := openDemo(t, session.Options{})
	if _, err := s.Check(context.Background()); err != nil {
		t.Fatal(err)
	}
	ch, cancel := s.Subscribe(1) // never read until the run is over
	done := make(chan error, 1)
	go func() { done <- s.Run(context.Background(), session.OneSerial("QM205-000003")) }()
	select {
	case err := <-done:
		if err != nil {
			t.Fatal(err)
		}
	case <-time.After(time.Minute):
		t.Fatal("a consumer that reads nothing blocked the loop")
	}
	if s.Dropped() == 0 {
		t.Error("no drop counted for a full buffer")
	}
	first := <-ch
	if first.Kind != session.KindSessionStarted {
		t.Errorf("kept %s, want the first event", first.Kind)
	}
	cancel()
}

func TestWaitForCheckRunsCheckInsideSession(t *testing.T) {
	s := openDemo(t, session.Options{WaitForCheck: true})
	ch, _ := s.Subscribe(1024)
	serials := make(chan string)
	done := make(chan error, 1)
	go func() { done <- s.Run(context.Background(), session.ChanScanner(serials)) }()
	var sawDue bool
	for e := range ch {
		switch e.Kind {
		case session.KindCheckDue:
			sawDue = true
			s.RequestCheck()
		case session.KindCheckResult:
			if !e.Check.Report.OK {
				t.Fatalf("check refused: %v", e.Check.Report.Faults)
			}
			serials <- "QM205-000004"
		case session.KindVerdictCommitted:
			if e.Verdict.Run.Verdict == "" {
				t.Error("verdict without verdict")
			}
			close(serials)
		case session.KindSessionEnded:
			if !sawDue {
				t.Error("no check_due before the check")
			}
			if err := <-done; err != nil {
				t.Fatal(err)
			}
			return
		}
	}
}

func TestStopWhileWaitingForScan(t *testing.T) {
	s := openDemo(t, session.Options{})
	if _, err := s.Check(context.Background()); err != nil {
		t.Fatal(err)
	}
	ch, _ := s.Subscribe(64)
	ctx, stop := context.WithCancel(context.Background())
	defer stop()
	done := make(chan error, 1)
	go func() { done <- s.Run(ctx, session.ChanScanner(make(chan string))) }()
	for e := range ch {
		if e.Kind == session.KindSessionStarted {
			stop()
		}
		if e.Kind == session.KindSessionEnded {
			if e.Ended.Reason != session.EndStopped {
				t.Errorf("reason %q", e.Ended.Reason)
			}
			break
		}
	}
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	if s.Rig().Line.Powered() {
		t.Error("unit power on after a stop")
	}
}

func TestFailActionForEveryCode(t *testing.T) {
	for _, c := range []sequences.FailCode{sequences.CodeClockDead, sequences.CodeClockLow, sequences.CodeClockHigh, sequences.CodeIdleLatched,
		sequences.CodeNoTrip, sequences.CodeTripLow, sequences.CodeTripHigh, sequences.CodeTripNoisy, sequences.CodeStuckLatched,
		sequences.CodeLidOpen, sequences.CodeStepTimeout, sequences.CodePinError, sequences.CodeStationError} {
		if sequences.FailAction(c) == "" {
			t.Errorf("fail code %s has no technician action", c)
		}
	}
}
