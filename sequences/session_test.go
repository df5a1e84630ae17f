package sequences_test

import (
	"context"
	"errors"
	"strings"
	"testing"

	"padline/sequences"
)

// memLog is a recorder that keeps runs in memory and answers PriorRuns.
type memLog struct {
	runs    []sequences.Run
	failErr error // Record fails with it when set
}

func (m *memLog) Record(_ context.Context, r *sequences.Run) (int64, error) {
	if m.failErr != nil {
		return 0, m.failErr
	}
	m.runs = append(m.runs, *r)
	return int64(len(m.runs)), nil
}

func (m *memLog) PriorRuns(_ context.Context, serial string) (tested, failed int, err error) {
	for _, r := range m.runs {
		if r.Serial == serial && (r.Verdict == sequences.Pass || r.Verdict == sequences.Fail) {
			tested++
			if r.Verdict == sequences.Fail {
				failed++
			}
		}
	}
	return tested, failed, nil
}

func newSession(t *testing.T, f *fakeStation, log *memLog) *sequences.Session {
	t.Helper()
	plan, err := sequences.NewPlan(demoConfig(), f.ladder)
	if err != nil {
		t.Fatal(err)
	}
	return &sequences.Session{Plan: plan, Station: f, Clock: f.clock, Recorder: log,
		Template: sequences.Run{Variant: "QM-205", Station: "L2-S1"},
		Retest:   &sequences.RetestPolicy{Max: 1, FlagPassAfterFail: true}}
}

func TestSessionRetestPolicy(t *testing.T) {
	f := newFake(demoLevels(t), 1)
	log := &memLog{}
	s := newSession(t, f, log)
	ctx := context.Background()

	// First test fails (trip far above the high limit), the retest passes
	// and is flagged, a third test is refused.
	f.TripPF = 80
	oc, err := s.Test(ctx, "QM205-000001")
	if err != nil || oc.Run.Verdict != sequences.Fail || oc.Run.FailCode != sequences.CodeTripHigh {
		t.Fatalf("first test: %v %+v", err, oc)
	}
	f.TripPF = 29.7
	oc, err = s.Test(ctx, "QM205-000001")
	if err != nil || oc.Run.Verdict != sequences.Pass || oc.PriorFails != 1 {
		t.Fatalf("retest: %v %+v", err, oc)
	}
	last := oc.Run.Measurements[len(oc.Run.Measurements)-1]
	if last.Step != "retest" || last.Name != "prior_fails" || last.Value != 1 {
		t.Errorf("pass after fail not flagged: %+v", last)
	}
	// The passed unit scanned again is a repeat, not a retest: tested.
	oc, err = s.Test(ctx, "QM205-000001")
	if err != nil || oc.PriorPasses != 1 || oc.PriorFails != 1 {
		t.Fatalf("repeat of a passed unit: %v %+v", err, oc)
	}

	// Only failed attempts count: fail, retest fails, the next is refused.
	f.TripPF = 80
	for i := 0; i < 2; i++ {
		if oc, err := s.Test(ctx, "QM205-000002"); err != nil || oc.Run.Verdict != sequences.Fail {
			t.Fatalf("test %d: %v %+v", i+1, err, oc)
		}
	}
	calls, runs := f.N, len(log.runs)
	_, err = s.Test(ctx, "QM205-000002")
	if !errors.Is(err, sequences.ErrRetestLimit) {
		t.Errorf("third test after two fails: %v, want ErrRetestLimit", err)
	}
	if err != nil && strings.Contains(err.Error(), "sequences:") {
		t.Errorf("operator message carries a package prefix: %v", err)
	}
	if f.N != calls || len(log.runs) != runs {
		t.Errorf("a refused serial touched the station (%d ops) or the log (%d runs)", f.N-calls, len(log.runs)-runs)
	}
}

func TestSessionNotSavedShowsNoVerdict(t *testing.T) {
	f := newFake(demoLevels(t), 2)
	log := &memLog{failErr: errors.New("disk full")}
	s := newSession(t, f, log)
	oc, err := s.Test(context.Background(), "QM205-000002")
	if oc != nil || !errors.Is(err, sequences.ErrNotSaved) {
		t.Fatalf("got %+v, %v; want no outcome and ErrNotSaved", oc, err)
	}
	f.checkSafe(t)
}

func TestSessionRefusesSerial(t *testing.T) {
	f := newFake(demoLevels(t), 3)
	s := newSession(t, f, &memLog{})
	bad := errors.New("bad serial")
	s.CheckSerial = func(string) error { return bad }
	if _, err := s.Test(context.Background(), "X"); !errors.Is(err, bad) || f.N != 0 {
		t.Errorf("err %v after %d station operations", err, f.N)
	}
}
