package sequences

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	"padline/fixture"
)

// Station is the hardware a plan drives; *fixture.Fixture satisfies it.
type Station interface {
	Power(on bool) error
	LidClosed() (bool, error)
	SetPattern(p uint16) error
	Sample(k int, period time.Duration) (highs int, err error)
	MeasureClock(periods int, timeout time.Duration) (hz float64, err error)
	Halt() error
}

// Clock is how plans wait and measure fixture time: the wall clock on a
// station, virtual time in the simulator.
type Clock interface {
	Now() time.Time
	Sleep(d time.Duration)
}

// Trial is one unit's test in progress: the station, the clock, the run
// record being filled, and the fixture time spent per phase. Steps act on
// the station only through the trial, so budgets and cancellation apply to
// every operation.
type Trial struct {
	ctx      context.Context
	st       Station
	clock    Clock
	run      *Run
	step     StepName
	deadline time.Time
	period   time.Duration

	// Phases is the fixture time spent per phase: the step names, and
	// "bracket"/"climb"/"refine"/"guard" inside the trip search.
	Phases map[string]time.Duration
	// Trip is the trip search's result, when the search ran.
	Trip *TripResult
	// Probes counts the trip search's probes.
	Probes int

	idle    *ProbeRecord // the folded idle check's samples, for the search
	clockHz float64      // the unit's measured clock, 0 until measured
}

// Run returns the record the trial fills.
func (t *Trial) Run() *Run { return t.run }

// check fails when the context has ended or the step budget is spent.
func (t *Trial) check() error {
	if err := t.ctx.Err(); err != nil {
		return err
	}
	if !t.deadline.IsZero() && t.clock.Now().After(t.deadline) {
		return ErrStepTimeout
	}
	return nil
}

// Power switches unit power.
func (t *Trial) Power(on bool) error {
	if err := t.check(); err != nil {
		return err
	}
	return t.st.Power(on)
}

// SetPattern closes exactly the rungs in p and waits for them to settle.
func (t *Trial) SetPattern(p uint16) error {
	if err := t.check(); err != nil {
		return err
	}
	return t.st.SetPattern(p)
}

// Sample takes k latch samples one unit clock period apart.
func (t *Trial) Sample(k int) (int, error) {
	if err := t.check(); err != nil {
		return 0, err
	}
	if su, ok := t.st.(untilSampler); ok {
		n, err := su.SampleUntil(t.ctx, t.deadline, k, t.period)
		if errors.Is(err, fixture.ErrDeadline) {
			err = ErrStepTimeout
		}
		return n, err
	}
	return t.st.Sample(k, t.period)
}

// untilSampler is a station that stops a long sample within one clock
// period when the context ends or the step budget is spent
// (*fixture.Fixture).
type untilSampler interface {
	SampleUntil(ctx context.Context, deadline time.Time, k int, period time.Duration) (int, error)
}

// MeasureClock measures the unit's clock frequency over n periods.
func (t *Trial) MeasureClock(n int) (float64, error) {
	if err := t.check(); err != nil {
		return 0, err
	}
	return t.st.MeasureClock(n, time.Duration(n+4)*t.period)
}

// LidClosed reports the lid switch.
func (t *Trial) LidClosed() (bool, error) {
	if err := t.check(); err != nil {
		return false, err
	}
	return t.st.LidClosed()
}

// Sleep waits d on the trial's clock.
func (t *Trial) Sleep(d time.Duration) error {
	if err := t.check(); err != nil {
		return err
	}
	// A long wait (a power settle of seconds) sleeps one clock period at
	// a time, so a stop request or a spent budget ends it within a period.
	step := t.period
	if step <= 0 {
		step = d
	}
	for d > step {
		t.clock.Sleep(step)
		d -= step
		if err := t.check(); err != nil {
			return err
		}
	}
	t.clock.Sleep(d)
	return t.check()
}

// Measure records a measurement of the current step and returns its verdict:
// Fail when value lies outside [low, high] (NaN = that side unlimited) or is
// itself NaN.
func (t *Trial) Measure(name Quantity, value float64, unit string, low, high float64) Verdict {
	v := Pass
	if math.IsNaN(value) || (!math.IsNaN(low) && value < low) || (!math.IsNaN(high) && value > high) {
		v = Fail
	}
	t.run.Measurements = append(t.run.Measurements, Measurement{
		Step: t.step, Name: name, Value: value, Unit: unit, Low: low, High: high, Verdict: v,
	})
	return v
}

// fail builds the failure a step returns for code.
func fail(code FailCode, format string, args ...any) error {
	return &UnitFailure{Code: code, Detail: fmt.Sprintf(format, args...)}
}
