package sequences

import (
	"context"
	"errors"
	"fmt"
	"time"
)

// Step is one stage of a plan. It drives the station through the trial,
// records measurements on it, and returns nil, a *UnitFailure when the unit
// is at fault, or any other error when the station is (station-fault).
type Step interface {
	Do(ctx context.Context, t *Trial) error
}

// StepFunc adapts an ordinary function to a Step.
type StepFunc func(ctx context.Context, t *Trial) error

var _ Step = StepFunc(nil)

// Do calls f.
func (f StepFunc) Do(ctx context.Context, t *Trial) error { return f(ctx, t) }

// UnitFailure is returned by a step when the unit under test, not the
// station, fails: the code is the run's fail code.
type UnitFailure struct {
	Code   FailCode
	Detail string
}

// Error says the unit fails, with the code and the detail.
func (e *UnitFailure) Error() string {
	if e.Detail == "" {
		return "unit fails: " + string(e.Code)
	}
	return "unit fails: " + string(e.Code) + ": " + e.Detail
}

// ErrStepTimeout is returned when a step overruns its fixture-time budget.
var ErrStepTimeout = errors.New("sequences: step timed out")

// Timeout bounds the fixture time a step may take. Time is the trial's
// injected clock, so the budget holds in virtual time too: every station
// operation made through the trial checks the deadline and fails with
// ErrStepTimeout once it has passed, and so does a step that would succeed
// after its budget ran out.
func Timeout(d time.Duration) func(Step) Step {
	return func(next Step) Step {
		return StepFunc(func(ctx context.Context, t *Trial) error {
			prev := t.deadline
			dl := t.clock.Now().Add(d)
			if prev.IsZero() || dl.Before(prev) {
				t.deadline = dl
			}
			defer func() { t.deadline = prev }()
			err := next.Do(ctx, t)
			if err == nil && t.clock.Now().After(dl) {
				// The step's last operation overran: nothing after it
				// checked the deadline.
				return ErrStepTimeout
			}
			return err
		})
	}
}

// Retry runs a step up to n times more while it fails for a station reason
// (never when the unit fails or the context ends), discarding the
// measurements of failed attempts.
func Retry(n int) func(Step) Step {
	return func(next Step) Step {
		return StepFunc(func(ctx context.Context, t *Trial) error {
			var err error
			for attempt := 0; attempt <= n; attempt++ {
				mark := len(t.run.Measurements)
				err = next.Do(ctx, t)
				var uf *UnitFailure
				if err == nil || errors.As(err, &uf) || ctx.Err() != nil {
					return err
				}
				t.run.Measurements = t.run.Measurements[:mark]
			}
			return err
		})
	}
}

// Named records name as the step name of every measurement the step makes
// and prefixes station errors with it.
func Named(name StepName) func(Step) Step {
	return func(next Step) Step {
		return StepFunc(func(ctx context.Context, t *Trial) error {
			prev := t.step
			t.step = name
			defer func() { t.step = prev }()
			err := next.Do(ctx, t)
			var uf *UnitFailure
			if err != nil && !errors.As(err, &uf) {
				return fmt.Errorf("step %s: %w", name, err)
			}
			return err
		})
	}
}

// Wrap applies wrappers to s, the first wrapper outermost.
func Wrap(s Step, wrappers ...func(Step) Step) Step {
	for i := len(wrappers) - 1; i >= 0; i-- {
		s = wrappers[i](s)
	}
	return s
}
