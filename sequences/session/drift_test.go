package session_test

import (
	"context"
	"fmt"
	"testing"

	"padline/sequences/session"
)

// A step in the line's trip points (a reel of sense resistors 20 % low:
// units trip about 10 pF higher) raises drift_alarm events; the units
// before it raise none.
func TestDriftAlarmEvent(t *testing.T) {
	ctx := context.Background()
	s := openDemo(t, session.Options{})
	if rep, err := s.Check(ctx); err != nil || !rep.OK {
		t.Fatalf("check %v %v", rep.Faults, err)
	}
	ch, _ := s.Subscribe(1 << 14)
	serials := make(chan string)
	done := make(chan error, 1)
	go func() { done <- s.Run(ctx, session.ChanScanner(serials)) }()
	const before, after = 30, 40
	for i := 1; i <= before; i++ {
		serials <- fmt.Sprintf("QM205-%06d", i)
	}
	um := session.UnitModel(s.Rig().Variant, s.Rig().Station.Sim)
	um.SenseR.Mean *= 0.8
	um.SenseR.Min *= 0.8
	um.SenseR.Max *= 0.8
	if err := s.Rig().Line.SetUnitModel(um); err != nil {
		t.Fatal(err)
	}
	for i := before + 1; i <= before+after; i++ {
		serials <- fmt.Sprintf("QM205-%06d", i)
	}
	close(serials)
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	first := 0
	for len(ch) > 0 {
		if e := <-ch; e.Kind == session.KindDriftAlarm && first == 0 {
			first = e.Drift.Unit
			t.Logf("first alarm: %s", e.Drift.Message)
		}
	}
	if first == 0 {
		t.Fatal("no drift alarm after a step of about 10 pF in the trip points")
	}
	if first <= before-3 {
		t.Errorf("first alarm at passed unit %d, before the step at about unit %d", first, before)
	}
}
