package sequences

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/bits"
	"sync"
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
	// FoldChecks folds the clock, idle and release checks into the trip
	// search where the physics allows (see NewPlan). The clock is then
	// read from the edges the idle samples wait for, which needs a station
	// that is an EdgeSampler and ClockPeriods > 0; without them the clock is
	// not measured.
	FoldChecks bool
	// RelaySettle is the relays' operate + bounce time. When set (and
	// Search.MoveCostSamples is 0) the search is told what a change of level
	// costs: with the clock read from edges, the periods a sample waits
	// beyond its own, ⌈settle/period⌉ − 1 (0 when the relays settle inside
	// one period of this unit's clock); without, settle/Period.
	RelaySettle time.Duration
	// SigmaWindow is how many recent passing units' fitted σ set the trip
	// search's prior on σ (default 50; −1: never, keep Search's prior):
	// once SigmaMinUnits (default 20) of them are in, the prior is centred
	// on their geometric mean with their SD of ln σ (at least 0.15) — the
	// variant's recent σ on this station. Until then the prior is Search's
	// (the variant's expected spread). RecentSigmaPF seeds the window, for
	// example from the shift log's last runs of the variant. Each run
	// records the prior it was searched with (prior_sigma_pf,
	// prior_sigma_log_sd, prior_sigma_units: 0 for the variant's own).
	SigmaWindow, SigmaMinUnits int
	RecentSigmaPF              []float64
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
	// The folded checks (PlanConfig.FoldChecks) and the search's prior.
	MeasIdleLows           Quantity = "idle_lows"             // latch lows at or above the bottom level, idle check
	MeasReleaseLows        Quantity = "release_lows"          // latch lows after the first high reading
	MeasPriorSigmaPF       Quantity = "prior_sigma_pf"        // centre of the search's prior on σ, pF
	MeasPriorSigmaLogSD    Quantity = "prior_sigma_log_sd"    // its SD of ln σ
	MeasPriorSigmaUnits    Quantity = "prior_sigma_units"     // recent passing units it rests on (0: the variant's)
	MeasPriorSigmaLogUnits Quantity = "prior_sigma_log_units" // of those, units read from the shift log at start
	MeasPriorTripPF        Quantity = "prior_trip_pf"         // centre of the search's prior on the trip point, pF (the variant's prediction)
	MeasPriorTripSDPF      Quantity = "prior_trip_sd_pf"      // its SD, pF
	MeasSigmaRefPF         Quantity = "sigma_ref_pf"          // the unit's σ under the variant's own prior (what the window notes)
	// The fixture offset (Plan.SetOffset): the trip as found on the
	// ladder's entered values, the offset added to it and its standard
	// uncertainty.
	MeasTripLadderPF  Quantity = "trip_ladder_pf"
	MeasFixtureOffPF  Quantity = "fixture_offset_pf"
	MeasFixtureOffUPF Quantity = "fixture_offset_u_pf"
)

// Plan is the ordered steps run on every unit of a variant.
type Plan struct {
	cfg       PlanConfig
	levels    []Level
	steps     []Step
	names     []StepName
	powerDown Step

	mu       sync.Mutex
	recent   []float64 // ln σ of the last SigmaWindow passing units
	logUnits int       // of recent, how many came from RecentSigmaPF
	offset   *FixtureOffset
	rungs    int // the ladder's rung count (highest pattern bit + 1)
}

// SetOffset makes every later unit's trip point the trip found on the
// ladder's entered values plus the fixture offset o at that trip (nil: no
// correction). Each run records the trip as found (trip_ladder_pf), the
// offset and its standard uncertainty (fixture_offset_pf,
// fixture_offset_u_pf).
func (p *Plan) SetOffset(o *FixtureOffset) {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.offset = o
}

// Offset returns the fixture offset in force (nil: none).
func (p *Plan) Offset() *FixtureOffset {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.offset
}

// sigmaPrior is the prior on σ for the next unit and how many recent units
// it rests on (0: the search options' own).
func (p *Plan) sigmaPrior() (sigmaPF, logSD float64, units, logUnits int) {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.cfg.SigmaWindow < 0 || len(p.recent) < p.cfg.SigmaMinUnits {
		return 0, 0, 0, 0
	}
	var m, m2 float64
	for _, l := range p.recent {
		m += l
	}
	m /= float64(len(p.recent))
	for _, l := range p.recent {
		m2 += (l - m) * (l - m)
	}
	sd := math.Sqrt(m2 / float64(len(p.recent)-1))
	return math.Exp(m), math.Max(sd, 0.15), len(p.recent), p.logUnits
}

// SigmaWindow is how many recent units' σ set the search's prior (0 when
// the plan keeps its search options' prior).
func (p *Plan) SigmaWindow() int { return max(p.cfg.SigmaWindow, 0) }

// SeedSigma puts σ values from before this plan (the shift log's last
// passing units of the variant, oldest first: their sigma_ref_pf) into the
// window ahead of the units the plan tests; each run records how many of
// its prior's units came so (prior_sigma_log_units).
func (p *Plan) SeedSigma(sigmaPF []float64) {
	for _, sg := range sigmaPF {
		p.noteSigma(sg)
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	p.logUnits = len(p.recent)
}

// noteSigma adds a passing unit's fitted σ to the window.
func (p *Plan) noteSigma(sigmaPF float64) {
	if p.cfg.SigmaWindow < 0 || !(sigmaPF > 0) || math.IsInf(sigmaPF, 0) || math.IsNaN(sigmaPF) {
		return
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	p.recent = append(p.recent, math.Log(sigmaPF))
	if n := len(p.recent); n > p.cfg.SigmaWindow {
		p.recent = append(p.recent[:0], p.recent[n-p.cfg.SigmaWindow:]...)
		p.logUnits = max(0, p.logUnits-(n-p.cfg.SigmaWindow))
	}
}

// NewPlan builds the standard plan — power up and settle, clock frequency
// (when ClockPeriods > 0), idle check, release check, trip search — and the
// power-down step that always runs last. The release check comes before the
// search: a latch that cannot fall again would make every later probe read
// high and pass for a low trip point.
//
// With FoldChecks the plan is power up, idle, trip search, power down:
//   - idle samples the bottom level (no rung closed) for 3 periods (fewer
//     when IdlePeriods is smaller, at least 2) and reads the unit's clock
//     from the span of the edges those samples waited for: no edge is
//     clock_dead, a frequency outside the limits clock_low or clock_high
//     (judged first, as the clock step would), any high sample
//     idle_latched. The rest of the IdlePeriods low readings come from the
//     search (see idleRest), after the release judgement;
//   - the trip search books those samples as its own bottom level (so it
//     does not probe the bottom again) and judges release from its own
//     probes: the latch is re-sampled every clock period, so a latch that
//     reads low at any probe after its first high reading has fallen again.
//     A unit that latched and never read low afterwards, although the
//     bottom level read low before, is stuck_latched; this is judged before
//     the trip point, as the release step came before the search.
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
	if cfg.SigmaWindow == 0 {
		cfg.SigmaWindow = 50
	}
	if cfg.SigmaMinUnits <= 0 {
		cfg.SigmaMinUnits = 20
	}
	p := &Plan{cfg: cfg, levels: levels}
	for _, sg := range cfg.RecentSigmaPF {
		p.noteSigma(sg)
	}
	p.logUnits = len(p.recent)
	var all uint16
	for _, l := range levels {
		all |= l.Pattern
	}
	p.rungs = bits.Len16(all)
	add := func(name StepName, s Step) {
		p.steps = append(p.steps, Wrap(s, Named(name), Timeout(cfg.StepTimeout)))
		p.names = append(p.names, name)
	}
	add(StepPowerUp, StepFunc(p.powerUp))
	if cfg.FoldChecks {
		add(StepIdle, StepFunc(p.idleClock))
		add(StepTripSearch, StepFunc(p.tripSearch))
		p.powerDown = Wrap(StepFunc(powerDown), Named(StepPowerDown), Timeout(cfg.StepTimeout))
		return p, nil
	}
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
		if t.Trip != nil && t.Trip.Found && !t.Trip.Below && p.cfg.SigmaWindow > 0 {
			p.noteSigma(t.Trip.SigmaRefPF)
		}
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
	return t.timed(string(StepClock), func() error { return p.clockCheck(t) })
}

// clockCheck measures the clock over ClockPeriods and judges it.
func (p *Plan) clockCheck(t *Trial) error {
	hz, err := t.MeasureClock(p.cfg.ClockPeriods)
	if err != nil {
		if errors.Is(err, fixture.ErrNoClockEdges) {
			t.Measure(MeasClockHz, 0, "Hz", p.cfg.Limits.ClockLowHz, p.cfg.Limits.ClockHighHz)
			return fail(CodeClockDead, "no edges at the clock test point")
		}
		return err
	}
	t.clockHz = hz
	if t.Measure(MeasClockHz, hz, "Hz", p.cfg.Limits.ClockLowHz, p.cfg.Limits.ClockHighHz) == Fail {
		if hz < p.cfg.Limits.ClockLowHz {
			return fail(CodeClockLow, "%.1f Hz < %.1f Hz", hz, p.cfg.Limits.ClockLowHz)
		}
		return fail(CodeClockHigh, "%.1f Hz > %.1f Hz", hz, p.cfg.Limits.ClockHighHz)
	}
	return nil
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

// EdgeSampler is the optional station capability of sampling the latch and
// returning the span of clock edges the samples waited for (k−1 periods);
// *fixture.Fixture has it.
type EdgeSampler interface {
	SampleEdges(k int, period time.Duration) (highs int, span time.Duration, err error)
}

// idleClock is the folded idle check: the bottom level for IdlePeriods
// (at least 2) periods, the clock read from the samples' edges.
func (p *Plan) idleClock(ctx context.Context, t *Trial) error {
	return t.timed(string(StepIdle), func() error {
		if err := t.SetPattern(p.levels[0].Pattern); err != nil {
			return err
		}
		k := idleLead(p.cfg.IdlePeriods)
		es, edges := t.st.(EdgeSampler)
		if !edges && p.cfg.ClockPeriods > 0 {
			// The station cannot time its samples' edges: measure the
			// clock apart, as the clock step does.
			if err := p.clockCheck(t); err != nil {
				return err
			}
		}
		edges = edges && p.cfg.ClockPeriods > 0
		var highs int
		var span time.Duration
		var err error
		if edges {
			if err = t.check(); err == nil {
				// Wait for each edge as long as the clock step's gate
				// would ((ClockPeriods + 4) slowest periods; the fixture
				// waits four of the periods given): a clock far below its
				// limits is clock_low, not clock_dead.
				wait := t.period * time.Duration(p.cfg.ClockPeriods+4) / 4
				highs, span, err = es.SampleEdges(k, wait)
			}
		} else {
			highs, err = t.Sample(k)
		}
		lim := p.cfg.Limits
		if err != nil {
			if edges && errors.Is(err, fixture.ErrNoClockEdges) {
				t.Measure(MeasClockHz, 0, "Hz", lim.ClockLowHz, lim.ClockHighHz)
				return fail(CodeClockDead, "no edges at the clock test point")
			}
			return err
		}
		if edges {
			if !(span > 0) {
				return fmt.Errorf("%d clock periods in %v: the station clock did not advance", k-1, span)
			}
			hz := float64(k-1) / span.Seconds()
			t.clockHz = hz
			if t.Measure(MeasClockHz, hz, "Hz", lim.ClockLowHz, lim.ClockHighHz) == Fail {
				if hz < lim.ClockLowHz {
					return fail(CodeClockLow, "%.1f Hz < %.1f Hz", hz, lim.ClockLowHz)
				}
				return fail(CodeClockHigh, "%.1f Hz > %.1f Hz", hz, lim.ClockHighHz)
			}
		}
		t.idle = &ProbeRecord{Level: 0, PF: p.levels[0].PF, K: k, Highs: highs, Phase: string(StepIdle)}
		if t.Measure(MeasIdleHighs, float64(highs), "count", 0, 0) == Fail {
			return fail(CodeIdleLatched, "latch high %d of %d periods at %.2f pF", highs, k, p.levels[0].PF)
		}
		return nil
	})
}

// moveCost is a change of level's cost in sample periods beyond its
// samples: with a measured clock (hz > 0) the whole periods the relays'
// settle adds before the next edge, else settle over the fixed period.
func moveCost(settle time.Duration, hz float64, period time.Duration) float64 {
	if hz > 0 {
		return math.Max(0, math.Ceil(settle.Seconds()*hz)-1)
	}
	return settle.Seconds() / period.Seconds()
}

// idleLead is how many of the idle periods the folded idle check samples
// at the bottom level before the search: 3 (a two-period span for the
// clock), or all of them when fewer are asked.
func idleLead(idlePeriods int) int { return max(min(idlePeriods, 3), 2) }

// idleRest completes the folded idle check after the search: the latch
// must have read low IdlePeriods times with the ladder at or above the
// bottom level. A low reading at a higher capacitance is stronger evidence
// than one at the bottom (the race only slows as capacitance grows, so a
// latch low at C stays low below C), so the search's low readings count;
// any shortfall is sampled at the bottom level.
func (p *Plan) idleRest(t *Trial, probes []ProbeRecord) error {
	if t.idle == nil {
		return nil
	}
	lows := t.idle.K - t.idle.Highs
	for _, pr := range probes {
		lows += pr.K - pr.Highs
	}
	highs := 0
	if short := p.cfg.IdlePeriods - lows; short > 0 {
		start := t.clock.Now()
		err := t.SetPattern(p.levels[0].Pattern)
		if err == nil {
			highs, err = t.Sample(short)
		}
		t.Phases[string(StepIdle)] += t.clock.Now().Sub(start)
		if err != nil {
			return err
		}
		lows += short - highs
	}
	prev := t.step
	t.step = StepIdle
	v := t.Measure(MeasIdleLows, float64(lows), "count", float64(p.cfg.IdlePeriods), NoLimit)
	t.step = prev
	if highs > 0 || v == Fail {
		return fail(CodeIdleLatched, "latch high %d times at %.2f pF after the search", highs, p.levels[0].PF)
	}
	return nil
}

// releaseLows counts the samples that read low after the first high
// reading among the probes: 0 with a high reading means the latch never
// fell again; −1 means it never read high.
func releaseLows(probes []ProbeRecord) int {
	lows, latched := 0, false
	for _, pr := range probes {
		if latched {
			lows += pr.K - pr.Highs
		}
		latched = latched || pr.Highs > 0
	}
	if !latched {
		return -1
	}
	return lows
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
	opt := p.cfg.Search
	if opt.MoveCostSamples == 0 && p.cfg.RelaySettle > 0 {
		opt.MoveCostSamples = moveCost(p.cfg.RelaySettle, t.clockHz, p.cfg.Period)
	}
	if t.idle != nil {
		opt.Known = append(append([]ProbeRecord(nil), opt.Known...), *t.idle)
	}
	if opt.Refine != Laplace {
		// The window notes each unit's σ under the variant's own prior:
		// the posterior geometric mean, not the maximum, which with the
		// samples a search takes (most near the trip point) lies well below
		// the truth (by about a quarter on the demo line).
		if own, err := opt.withDefaults(); err == nil {
			opt.SigmaRefPrior = ProbitPrior{SigmaPF: own.SpreadPriorPF / spreadPerSigma, LogSD: own.SpreadPriorLogSD}
		}
		sg, lsd, units, logUnits := p.sigmaPrior()
		if units > 0 {
			opt.SpreadPriorPF, opt.SpreadPriorLogSD = sg*spreadPerSigma, lsd
		}
		o, err := opt.withDefaults()
		if err != nil {
			return err
		}
		t.Measure(MeasPriorSigmaPF, o.SpreadPriorPF/spreadPerSigma, "pF", NoLimit, NoLimit)
		t.Measure(MeasPriorSigmaLogSD, o.SpreadPriorLogSD, "", NoLimit, NoLimit)
		t.Measure(MeasPriorSigmaUnits, float64(units), "count", NoLimit, NoLimit)
		t.Measure(MeasPriorSigmaLogUnits, float64(logUnits), "count", NoLimit, NoLimit)
		if o.TripPriorSDPF > 0 {
			// In the levels' basis: a fixture offset (a few tenths of a
			// pF) is small beside the prior's SD and is not taken off.
			t.Measure(MeasPriorTripPF, o.TripPriorPF, "pF", NoLimit, NoLimit)
			t.Measure(MeasPriorTripSDPF, o.TripPriorSDPF, "pF", NoLimit, NoLimit)
		}
	}
	res, err := FindTrip(pr, pf, opt)
	for i, d := range pr.elapsed {
		if i < len(res.Probes) {
			t.Phases[res.Probes[i].Phase] += d
		}
	}
	t.Probes = len(pr.elapsed)
	if err != nil {
		return err
	}
	if res.Found && !res.Below && res.SigmaRefPF > 0 {
		t.Measure(MeasSigmaRefPF, res.SigmaRefPF, "pF", NoLimit, NoLimit)
	}
	if err := addOffset(t, p.Offset(), p.levels, p.rungs, &res); err != nil {
		return err
	}
	t.Trip = &res
	if p.cfg.FoldChecks {
		if lows := releaseLows(res.Probes); lows >= 0 {
			prev := t.step
			t.step = StepRelease
			v := t.Measure(MeasReleaseLows, float64(lows), "count", 1, NoLimit)
			t.step = prev
			if v == Fail {
				return fail(CodeStuckLatched, "latch never read low again after it latched at %.1f pF, though %.2f pF read low before",
					firstHigh(res.Probes), p.levels[0].PF)
			}
		}
		if err := p.idleRest(t, res.Probes); err != nil {
			return err
		}
	}
	return judgeTrip(t, res, p.cfg.Limits, p.levels[len(p.levels)-1].PF)
}

// measurer records one measurement of the current step and returns its
// verdict; *Trial and a panel site's record satisfy it.
type measurer interface {
	Measure(name Quantity, value float64, unit string, low, high float64) Verdict
}

// addOffset adds the fixture offset o (nil: none) at a found trip to res,
// for a trip searched on levels of a ladder of rungs rungs, and records the
// trip as found, the offset and its standard uncertainty (Plan.SetOffset).
// The single-unit plan and each site of a panel plan use it.
func addOffset(t measurer, o *FixtureOffset, levels []Level, rungs int, res *TripResult) error {
	if o == nil || !res.Found || res.Below || math.IsNaN(res.TripPF) {
		return nil
	}
	off, u, err := o.At(TripRungWeights(levels, rungs, res.TripPF, res.SigmaPF))
	if err != nil {
		return fmt.Errorf("fixture offset: %w", err)
	}
	t.Measure(MeasTripLadderPF, res.TripPF, "pF", NoLimit, NoLimit)
	t.Measure(MeasFixtureOffPF, off, "pF", NoLimit, NoLimit)
	t.Measure(MeasFixtureOffUPF, u, "pF", NoLimit, NoLimit)
	res.TripPF += off
	res.OffsetPF = off
	return nil
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

// firstHigh is the capacitance of the first probe that read high.
func firstHigh(probes []ProbeRecord) float64 {
	for _, pr := range probes {
		if pr.Highs > 0 {
			return pr.PF
		}
	}
	return math.NaN()
}

func powerDown(ctx context.Context, t *Trial) error {
	return t.timed(string(StepPowerDown), func() error {
		return errors.Join(t.SetPattern(0), t.Power(false))
	})
}
