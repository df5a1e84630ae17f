package sequences

import (
	"context"
	"errors"
	"fmt"
	"time"
)

// Lamps is the optional station capability of showing the verdict on the
// fixture's pass and fail lamps.
type Lamps interface {
	Lamps(pass, fail bool) error
}

// ErrRetestLimit refuses a serial that has used up its retests.
var ErrRetestLimit = errors.New("retest limit reached")

// RetestPolicy is a variant's rule for testing a serial again.
type RetestPolicy struct {
	// Max is how many times a serial may be tested again after a fail
	// (0: a failed unit is never retested). Only fails count: a passed
	// unit scanned again is a repeat, tested and announced as one.
	Max int
	// FlagPassAfterFail records a "retest/prior_fails" measurement on a
	// pass that follows fails, so the history shows it.
	FlagPassAfterFail bool
}

// PriorRuns tells how often a serial already got a unit verdict (pass or
// fail) and how many of those were fails; *store.DB has it.
type PriorRuns interface {
	PriorRuns(ctx context.Context, serial string) (tested, failed int, err error)
}

// ErrNotSaved is returned when a unit was tested but its run could not be
// committed: no verdict may be shown for it.
var ErrNotSaved = errors.New("run not saved")

// Session tests units one after another on one station for one variant and
// commits every run before its verdict is known to anyone.
type Session struct {
	Plan     *Plan
	Station  Station
	Clock    Clock
	Recorder Recorder
	// Template holds the fields every run of the session shares: variant,
	// config hash, station, fixture, operator, lot, software.
	Template Run
	// CheckSerial refuses a serial before anything touches the unit; nil
	// accepts every serial.
	CheckSerial func(serial string) error
	// Retest is applied when Recorder also implements PriorRuns; nil
	// allows any number of retests.
	Retest *RetestPolicy
	// WallClock, when set, stamps each run's start and finish (the station
	// clock still measures its duration): a simulated station runs on
	// virtual time, but its shift log must say when the test happened.
	WallClock func() time.Time
	// OnStep, when set, is told about every step of every unit as it
	// finishes (see StepObserver).
	OnStep StepObserver
}

// Outcome is one tested unit: its committed run, its id in the shift log and
// the trial's details (fixture time per phase, the trip search).
type Outcome struct {
	Run   Run
	ID    int64
	Trial *Trial
	// PriorFails is how many fails the serial had before this run; with
	// Pass it marks a pass after fail.
	PriorFails int
	// PriorPasses is how many passes the serial had before: > 0 makes
	// this run a repeat of a passed unit.
	PriorPasses int
}

// Test runs the plan on the unit with this serial, commits the run and then
// lights the lamps. A refused serial is not tested. When ctx ends mid-unit
// the unit gets no verdict and nothing is recorded (ErrAborted). A station
// fault is committed like any verdict and also returned as the error.
func (s *Session) Test(ctx context.Context, serial string) (*Outcome, error) {
	if s.CheckSerial != nil {
		if err := s.CheckSerial(serial); err != nil {
			return nil, err
		}
	}
	var priorFails, priorPasses int
	if pr, ok := s.Recorder.(PriorRuns); ok && s.Retest != nil {
		tested, failed, err := pr.PriorRuns(ctx, serial)
		if err != nil {
			if ctx.Err() != nil {
				return nil, fmt.Errorf("%w: %w", ErrAborted, ctx.Err())
			}
			return nil, err
		}
		if failed > s.Retest.Max {
			return nil, fmt.Errorf("%w: serial %s failed %d time(s) and the variant allows %d retest(s) after a fail; set the unit aside for review",
				ErrRetestLimit, serial, failed, s.Retest.Max)
		}
		priorFails, priorPasses = failed, tested-failed
	}
	run := s.Template
	run.Serial = serial
	run.Measurements = nil
	trial, runErr := s.Plan.ExecuteObserved(ctx, s.Station, s.Clock, &run, s.OnStep)
	if errors.Is(runErr, ErrAborted) {
		return nil, runErr
	}
	if runErr != nil && run.Verdict == StationFault {
		run.Fault = runErr.Error()
	}
	if s.WallClock != nil {
		d := run.Finished.Sub(run.Started)
		run.Finished = s.WallClock()
		run.Started = run.Finished.Add(-d)
	}
	if run.Verdict == Pass && priorFails > 0 && s.Retest != nil && s.Retest.FlagPassAfterFail {
		run.Measurements = append(run.Measurements, Measurement{
			Step: StepRetest, Name: MeasPriorFails, Value: float64(priorFails), Unit: "count",
			Low: NoLimit, High: NoLimit, Verdict: Pass,
		})
	}
	// The unit was tested to the end: record it even if a stop request
	// arrives now, so a verdict is never lost half-way.
	id, err := s.Recorder.Record(context.WithoutCancel(ctx), &run)
	if err != nil {
		if l, ok := s.Station.(Lamps); ok {
			_ = l.Lamps(false, true)
		}
		return nil, fmt.Errorf("%w: serial %s: %w", ErrNotSaved, serial, err)
	}
	if l, ok := s.Station.(Lamps); ok {
		if err := l.Lamps(run.Verdict == Pass, run.Verdict != Pass); err != nil && runErr == nil {
			runErr = fmt.Errorf("lamps: %w", err)
		}
	}
	return &Outcome{Run: run, ID: id, Trial: trial, PriorFails: priorFails, PriorPasses: priorPasses}, runErr
}
