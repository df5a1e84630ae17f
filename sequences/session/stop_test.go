package session_test

import (
	"context"
	"sync/atomic"
	"testing"

	"periph.io/x/conn/v3/gpio"

	"padline/fixture"
	"padline/fixture/sim"
	"padline/sequences/session"
	"padline/store"
)

// stopAfterReads is a latch pin that asks for a stop (as SIGTERM does in
// 'padline run') on its n-th read: deterministically mid-unit, with no
// timing race against the machine's load.
type stopAfterReads struct {
	gpio.PinIn
	n     int64
	reads atomic.Int64
	stop  context.CancelFunc
}

func (p *stopAfterReads) Read() gpio.Level {
	if p.reads.Add(1) == p.n {
		p.stop()
	}
	return p.PinIn.Read()
}

// A stop request in the middle of a unit: the unit gets no verdict and no
// log entry, the units before it keep theirs, Run returns nil after
// unit_aborted, and the fixture is left with power off and every rung open.
func TestStopMidUnitDeterministic(t *testing.T) {
	ctx := context.Background()
	path := checkedLog(t)

	// Count the latch reads one unit takes, on a rig of its own.
	count := func(stopAt int64) (*session.Session, *stopAfterReads, context.Context) {
		runCtx, stop := context.WithCancel(ctx)
		t.Cleanup(stop)
		var latch *stopAfterReads
		s := openDemoPins(t, path, func(p *fixture.Pins) {
			latch = &stopAfterReads{PinIn: p.Latch, n: stopAt, stop: stop}
			p.Latch = latch
		})
		return s, latch, runCtx
	}
	s, latch, runCtx := count(-1)
	if err := s.Run(runCtx, session.OneSerial("QM205-000100")); err != nil {
		t.Fatal(err)
	}
	perUnit := latch.reads.Load()
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	if perUnit < 4 {
		t.Fatalf("a unit reads the latch %d times: too few to stop inside one", perUnit)
	}

	// Stop half-way through the second unit.
	s, _, runCtx = count(perUnit + perUnit/2)
	defer s.Close()
	ch, _ := s.Subscribe(4096)
	serials := make(chan string, 3)
	serials <- "QM205-000101"
	serials <- "QM205-000102"
	serials <- "QM205-000103"
	close(serials)
	if err := s.Run(runCtx, session.ChanScanner(serials)); err != nil {
		t.Fatalf("Run after a stop = %v, want nil", err)
	}
	var verdicts, aborted []string
	var ended *session.Ended
	for len(ch) > 0 {
		e := <-ch
		switch e.Kind {
		case session.KindVerdictCommitted:
			verdicts = append(verdicts, e.Verdict.Run.Serial)
		case session.KindUnitAborted:
			aborted = append(aborted, e.Scan.Serial)
		case session.KindSessionEnded:
			ended = e.Ended
		}
	}
	if len(verdicts) != 1 || verdicts[0] != "QM205-000101" || len(aborted) != 1 || aborted[0] != "QM205-000102" {
		t.Fatalf("verdicts %v, aborted %v: want 101 judged and 102 stopped", verdicts, aborted)
	}
	if ended == nil || ended.Reason != session.EndStopped || ended.Tested != 1 {
		t.Errorf("end %+v", ended)
	}
	if s.Rig().Line.Powered() {
		t.Error("unit power on after the stop")
	}
	for i := range s.Rig().Station.Ladder.RungsPF {
		if st := s.Rig().Line.Relay(i); st != sim.RelayOpen {
			t.Errorf("rung %d %v after the stop", i, st)
		}
	}
	for e, err := range s.DB().Runs(ctx, store.Filter{Serial: "QM205-000102"}) {
		if err != nil {
			t.Fatal(err)
		}
		t.Errorf("the stopped unit was logged as run %d", e.ID)
	}
}
