package sequences

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	"padline/fixture"
)

// Level is one reachable ladder value: the external capacitance at the pad
// (closed rungs plus the fixture's calibrated stray) and its rung pattern.
type Level = fixture.Level

// FailCode is the short snake_case reason a run did not pass: a unit fail
// code or a station-fault code. The README's fail-code table lists them
// with the technician's action (FailAction).
type FailCode string

// Fail codes: the short reason a unit failed, one per failing check.
const (
	CodeClockDead    FailCode = "clock_dead"    // no oscillator edges at the clock test point
	CodeClockLow     FailCode = "clock_low"     // oscillator below its limits
	CodeClockHigh    FailCode = "clock_high"    // oscillator above its limits
	CodeIdleLatched  FailCode = "idle_latched"  // latch high with no ladder rung closed
	CodeNoTrip       FailCode = "no_trip"       // never latched anywhere on the ladder
	CodeTripLow      FailCode = "trip_low"      // trip point below the low test limit
	CodeTripHigh     FailCode = "trip_high"     // trip point above the high test limit
	CodeTripNoisy    FailCode = "trip_noisy"    // trip transition wider than allowed
	CodeStuckLatched FailCode = "stuck_latched" // latch stays high after the ladder opens
)

// Station-fault codes: why the station, not the unit, could not finish.
const (
	CodeLidOpen      FailCode = "lid_open"
	CodeStepTimeout  FailCode = "step_timeout"
	CodePinError     FailCode = "pin_error"
	CodeStationError FailCode = "station_error"
)

// ErrAborted is returned by Execute when its context ended mid-unit: the
// unit has no verdict and must not be logged as tested.
var ErrAborted = errors.New("unit stopped before its verdict")

// Limits are the test limits a plan judges against.
type Limits struct {
	TripLowPF, TripHighPF   float64
	ClockLowHz, ClockHighHz float64
	SpreadMaxPF             float64 // widest acceptable 10–90 % transition
}

// PlanConfig is a variant's plan with its parameters.
type PlanConfig struct {
	// PowerSettle is the wait after unit power-up.
	PowerSettle time.Duration
	// ClockPeriods is how many periods the clock measurement spans; 0: no
	// clock step (no clock pin wired).
	ClockPeriods int
	// IdlePeriods and ReleasePeriods are how many periods the latch must
	// read 0 in the idle and release checks (at least 1 each).
	IdlePeriods    int
	ReleasePeriods int
	// Period is the wait for one latch sample when no clock pin is wired:
	// the unit's slowest clock period.
	Period time.Duration
	// StepTimeout is each step's fixture-time budget (default 5 s).
	StepTimeout time.Duration
	// Search tunes the trip search; Limits are what the plan judges against.
	Search SearchOptions
	Limits Limits
}

// StepName names a step of a plan; every measurement carries one.
type StepName string

// Step names: every run's measurements carry one, and a StepObserver is
// told each as it finishes.
const (
	StepPowerUp    StepName = "power_up"
	StepClock      StepName = "clock"
	StepIdle       StepName = "idle"
	StepRelease    StepName = "release"
	StepTripSearch StepName = "trip_search"
	StepPowerDown  StepName = "power_down"
	// StepRetest is the pseudo-step of the measurement that flags a pass
	// after fails (MeasPriorFails).
	StepRetest StepName = "retest"
)

// Quantity names a measurement.
type Quantity string

// Measurement names.
const (
	MeasClockHz      Quantity = "clock_hz"      // oscillator frequency at the clock test point
	MeasIdleHighs    Quantity = "idle_highs"    // latch highs with no rung closed
	MeasReleaseHighs Quantity = "release_highs" // latch highs after the ladder opens
	MeasTripPF       Quantity = "trip_pf"       // trip point, pF
	MeasTripSEPF     Quantity = "trip_se_pf"    // standard error of the trip point, pF
	MeasSpreadPF     Quantity = "spread_pf"     // 10–90 % transition width, pF
	MeasPriorFails   Quantity = "prior_fails"   // fails before a pass (retest flag)
)

// Plan is the ordered steps run on every unit of a variant.
type Plan struct {
	cfg       PlanConfig
	levels    []Level
	steps     []Step
	names     []StepName
	powerDown Step
}

// NewPlan builds the standard plan — power up and settle, clock frequency
// (when ClockPeriods > 0), idle check, release check, trip search — and the
// power-down step that always runs last. The release check comes before the
// search: a latch that cannot fall again would make every later probe read
// high and pass for a low trip point.
func NewPlan(cfg PlanConfig, levels []Level) (*Plan, error) {
	if len(levels) < 2 {
		return nil, fmt.Errorf("plan needs at least 2 ladder levels, have %d", len(levels))
	}
	for i := 1; i < len(levels); i++ {
		if !(levels[i].PF > levels[i-1].PF) {
			return nil, fmt.Errorf("ladder levels not strictly ascending at index %d", i)
		}
	}
	if cfg.Period <= 0 {
		return nil, errors.New("plan needs the unit's clock period")
	}
	if cfg.IdlePeriods < 1 || cfg.ReleasePeriods < 1 {
		return nil, errors.New("plan needs at least one idle and one release period")
	}
	if cfg.StepTimeout <= 0 {
		cfg.StepTimeout = 5 * time.Second
	}
	p := &Plan{cfg: cfg, levels: levels}
	add := func(name StepName, s Step) {
		p.steps = append(p.steps, Wrap(s, Named(name), Timeout(cfg.StepTimeout)))
		p.names = append(p.names, name)
	}
	add(StepPowerUp, StepFunc(p.powerUp))
	if cfg.ClockPeriods > 0 {
		add(StepClock, StepFunc(p.clock))
	}
	add(StepIdle, StepFunc(p.idle))
	add(StepRelease, StepFunc(p.release))
	add(StepTripSearch, StepFunc(p.tripSearch))
	p.powerDown = Wrap(StepFunc(powerDown), Named(StepPowerDown), Timeout(cfg.StepTimeout))
	return p, nil
}

// Levels returns the ladder levels the plan searches.
func (p *Plan) Levels() []Level { return p.levels }

// Execute runs the plan on the unit in the fixture and fills run's verdict,
// fail code, measurements and times. The station is left with power off and
// every rung open on every path: a step's error, a panic (re-raised after
// halting) or the context ending (ErrAborted; run gets no verdict).
func (p *Plan) Execute(ctx context.Context, st Station, clk Clock, run *Run) (t *Trial, err error) {
	return p.ExecuteObserved(ctx, st, clk, run, nil)
}

// StepDone is one finished step as an observer sees it: its name, the
// measurements it added, its fixture time and its error (nil when it passed).
type StepDone struct {
	Step         StepName
	Measurements []Measurement
	FixtureTime  time.Duration
	Err          error
}

// StepObserver is told about every step as it finishes, power-down
// included. It runs on the unit's goroutine: it must return quickly.
type StepObserver func(StepDone)

// ExecuteObserved is Execute with obs (when not nil) told about every
// finished step.
func (p *Plan) ExecuteObserved(ctx context.Context, st Station, clk Clock, run *Run, obs StepObserver) (t *Trial, err error) {
	t = &Trial{ctx: ctx, st: st, clock: clk, run: run, period: p.cfg.Period, Phases: map[string]time.Duration{}}
	defer func() {
		if r := recover(); r != nil {
			_ = st.Halt()
			panic(r)
		}
	}()
	run.Started = clk.Now()
	var stepErr error
	observe := func(name StepName, s Step) error {
		n0, t0 := len(run.Measurements), clk.Now()
		err := s.Do(t.ctx, t)
		if obs != nil {
			obs(StepDone{Step: name, Measurements: run.Measurements[n0:len(run.Measurements):len(run.Measurements)],
				FixtureTime: clk.Now().Sub(t0), Err: err})
		}
		return err
	}
	for i, s := range p.steps {
		if stepErr = observe(p.names[i], s); stepErr != nil {
			break
		}
		// The lid must stay closed the whole test: opening it mid-test
		// is a station fault, never a unit verdict.
		if closed, err := st.LidClosed(); err != nil || !closed {
			stepErr = fmt.Errorf("after step %d: %w", i+1, errors.Join(fixture.ErrLidOpen, err))
			break
		}
	}
	// Power down even after a failure; it may not be cut short by the
	// caller's context, only by its own budget.
	t.ctx = context.WithoutCancel(ctx)
	downErr := observe(StepPowerDown, p.powerDown)
	t.ctx = ctx
	run.Finished = clk.Now()

	if ctx.Err() != nil {
		_ = st.Halt()
		run.Verdict, run.FailCode = "", ""
		return t, fmt.Errorf("%w: %w", ErrAborted, ctx.Err())
	}
	var uf *UnitFailure
	switch {
	case stepErr == nil && downErr == nil:
		run.Verdict, run.FailCode = Pass, ""
	case stepErr != nil && errors.As(stepErr, &uf) && downErr == nil:
		run.Verdict, run.FailCode = Fail, uf.Code
	default:
		_ = st.Halt()
		err = errors.Join(stepErr, downErr)
		run.Verdict, run.FailCode = StationFault, stationCode(err)
		return t, err
	}
	return t, nil
}

// stationCode names the station fault behind err.
func stationCode(err error) FailCode {
	switch {
	case errors.Is(err, fixture.ErrLidOpen):
		return CodeLidOpen
	case errors.Is(err, ErrStepTimeout):
		return CodeStepTimeout
	}
	var pe *fixture.PinError
	if errors.As(err, &pe) {
		return CodePinError
	}
	return CodeStationError
}

// timed adds the fixture time fn takes to phase.
func (t *Trial) timed(phase string, fn func() error) error {
	start := t.clock.Now()
	err := fn()
	t.Phases[phase] += t.clock.Now().Sub(start)
	return err
}

func (p *Plan) powerUp(ctx context.Context, t *Trial) error {
	return t.timed(string(StepPowerUp), func() error {
		closed, err := t.LidClosed()
		if err != nil {
			return err
		}
		if !closed {
			return fixture.ErrLidOpen
		}
		if err := t.SetPattern(0); err != nil {
			return err
		}
		if err := t.Power(true); err != nil {
			return err
		}
		return t.Sleep(p.cfg.PowerSettle)
	})
}

func (p *Plan) clock(ctx context.Context, t *Trial) error {
	return t.timed(string(StepClock), func() error {
		hz, err := t.MeasureClock(p.cfg.ClockPeriods)
		if err != nil {
			if errors.Is(err, fixture.ErrNoClockEdges) {
				t.Measure(MeasClockHz, 0, "Hz", p.cfg.Limits.ClockLowHz, p.cfg.Limits.ClockHighHz)
				return fail(CodeClockDead, "no edges at the clock test point")
			}
			return err
		}
		if t.Measure(MeasClockHz, hz, "Hz", p.cfg.Limits.ClockLowHz, p.cfg.Limits.ClockHighHz) == Fail {
			if hz < p.cfg.Limits.ClockLowHz {
				return fail(CodeClockLow, "%.1f Hz < %.1f Hz", hz, p.cfg.Limits.ClockLowHz)
			}
			return fail(CodeClockHigh, "%.1f Hz > %.1f Hz", hz, p.cfg.Limits.ClockHighHz)
		}
		return nil
	})
}

func (p *Plan) idle(ctx context.Context, t *Trial) error {
	return t.timed(string(StepIdle), func() error {
		if err := t.SetPattern(p.levels[0].Pattern); err != nil {
			return err
		}
		highs, err := t.Sample(p.cfg.IdlePeriods)
		if err != nil {
			return err
		}
		if t.Measure(MeasIdleHighs, float64(highs), "count", 0, 0) == Fail {
			return fail(CodeIdleLatched, "latch high %d of %d periods at %.2f pF", highs, p.cfg.IdlePeriods, p.levels[0].PF)
		}
		return nil
	})
}

// prober presents the trial's station to the search as ladder levels and
// times every probe.
type prober struct {
	t       *Trial
	levels  []Level
	elapsed []time.Duration
}

func (pr *prober) Probe(level, k int) (int, error) {
	start := pr.t.clock.Now()
	defer func() { pr.elapsed = append(pr.elapsed, pr.t.clock.Now().Sub(start)) }()
	if err := pr.t.SetPattern(pr.levels[level].Pattern); err != nil {
		return 0, err
	}
	return pr.t.Sample(k)
}

func (p *Plan) tripSearch(ctx context.Context, t *Trial) error {
	pf := make([]float64, len(p.levels))
	for i, l := range p.levels {
		pf[i] = l.PF
	}
	pr := &prober{t: t, levels: p.levels}
	res, err := FindTrip(pr, pf, p.cfg.Search)
	for i, d := range pr.elapsed {
		if i < len(res.Probes) {
			t.Phases[res.Probes[i].Phase] += d
		}
	}
	t.Probes = len(pr.elapsed)
	if err != nil {
		return err
	}
	t.Trip = &res
	return judgeTrip(t, res, p.cfg.Limits, p.levels[len(p.levels)-1].PF)
}

// measurer records one measurement of the current step and returns its
// verdict; *Trial and a panel site's record satisfy it.
type measurer interface {
	Measure(name Quantity, value float64, unit string, low, high float64) Verdict
}

// judgeTrip records a trip search's result against the limits and returns
// the unit's failure, if any; topPF is the highest level searched.
func judgeTrip(t measurer, res TripResult, lim Limits, topPF float64) error {
	if !res.Found {
		t.Measure(MeasTripPF, math.NaN(), "pF", lim.TripLowPF, lim.TripHighPF)
		return fail(CodeNoTrip, "no latch up to %.1f pF", topPF)
	}
	if res.Below {
		// The bottom of the ladder already trips the unit on every sample:
		// the trip point is at or below it.
		t.Measure(MeasTripPF, res.TripPF, "pF", lim.TripLowPF, lim.TripHighPF)
		return fail(CodeTripLow, "latched at the lowest level, %.2f pF", res.TripPF)
	}
	tripV := t.Measure(MeasTripPF, res.TripPF, "pF", lim.TripLowPF, lim.TripHighPF)
	t.Measure(MeasTripSEPF, res.SEPF, "pF", NoLimit, NoLimit)
	spreadV := t.Measure(MeasSpreadPF, res.SpreadPF, "pF", NoLimit, lim.SpreadMaxPF)
	switch {
	case res.Noisy || spreadV == Fail:
		return fail(CodeTripNoisy, "transition %.2f pF wide (limit %.2f pF), consistent %v, guard misread %v",
			res.SpreadPF, lim.SpreadMaxPF, res.Consistent, res.GuardMisread)
	case tripV == Fail && res.TripPF < lim.TripLowPF:
		return fail(CodeTripLow, "%.2f pF < %.2f pF", res.TripPF, lim.TripLowPF)
	case tripV == Fail:
		return fail(CodeTripHigh, "%.2f pF > %.2f pF", res.TripPF, lim.TripHighPF)
	}
	return nil
}

// release touches the unit with the lowest level at or above the high test
// limit (where every good unit trips), then opens the ladder: the latch must
// read 0 again for ReleasePeriods periods. A unit that does not latch at the
// touch level is left for the trip search to judge.
func (p *Plan) release(ctx context.Context, t *Trial) error {
	return t.timed(string(StepRelease), func() error {
		touch := len(p.levels) - 1
		for i, l := range p.levels {
			if l.PF >= p.cfg.Limits.TripHighPF {
				touch = i
				break
			}
		}
		if err := t.SetPattern(p.levels[touch].Pattern); err != nil {
			return err
		}
		latched, err := t.Sample(2)
		if err != nil || latched == 0 {
			return err
		}
		if err := t.SetPattern(p.levels[0].Pattern); err != nil {
			return err
		}
		highs, err := t.Sample(p.cfg.ReleasePeriods)
		if err != nil {
			return err
		}
		if t.Measure(MeasReleaseHighs, float64(highs), "count", 0, 0) == Fail {
			return fail(CodeStuckLatched, "latch still high %d of %d periods after the ladder opened from %.1f pF",
				highs, p.cfg.ReleasePeriods, p.levels[touch].PF)
		}
		return nil
	})
}

func powerDown(ctx context.Context, t *Trial) error {
	return t.timed(string(StepPowerDown), func() error {
		return errors.Join(t.SetPattern(0), t.Power(false))
	})
}
