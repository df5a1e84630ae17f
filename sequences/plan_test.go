package sequences_test

import (
	"context"
	"errors"
	"math"
	"slices"
	"strings"
	"testing"
	"time"

	"padline/fixture"
	"padline/sequences"
)

// Test limits for the fake QM-205 unit of newFake (trip 29.7 pF, 465 Hz,
// 10–90 % width 0.64 pF, from testdata/variants/QM-205.yaml by DEVELOPERS.md "Physics"). The limits themselves are
// this test's choice, inside the variant's 10–60 pF spec window
// (testdata/variants/QM-205.yaml).
const (
	tripLowPF, tripHighPF   = 20.0, 40.0
	clockLowHz, clockHighHz = 395.0, 535.0 // 465 Hz ± 15 %
	spreadMaxPF             = 2.0
)

// demoConfig is the plan the tests run: the fake unit's clock period is
// 1/465 Hz = 2.15 ms, so 2.5 ms is a safe slowest period.
func demoConfig() sequences.PlanConfig {
	return sequences.PlanConfig{
		PowerSettle:    20 * time.Millisecond,
		ClockPeriods:   16,
		IdlePeriods:    8,
		ReleasePeriods: 8,
		Period:         2500 * time.Microsecond,
		StepTimeout:    2 * time.Second,
		Limits: sequences.Limits{
			TripLowPF: tripLowPF, TripHighPF: tripHighPF,
			ClockLowHz: clockLowHz, ClockHighHz: clockHighHz,
			SpreadMaxPF: spreadMaxPF,
		},
	}
}

// execute runs cfg's plan on the fake with ctx.
func execute(t *testing.T, ctx context.Context, cfg sequences.PlanConfig, f *fakeStation) (*sequences.Trial, *sequences.Run, error) {
	t.Helper()
	p, err := sequences.NewPlan(cfg, f.ladder)
	if err != nil {
		t.Fatalf("NewPlan: %v", err)
	}
	run := &sequences.Run{Serial: "QM205-000001", Variant: "QM-205"}
	tr, err := p.Execute(ctx, f, f.clock, run)
	return tr, run, err
}

// measurements indexes a run's measurements by name, failing t on a
// duplicate.
func measurements(t *testing.T, run *sequences.Run) map[sequences.Quantity]sequences.Measurement {
	t.Helper()
	m := map[sequences.Quantity]sequences.Measurement{}
	for _, x := range run.Measurements {
		if _, dup := m[x.Name]; dup {
			t.Errorf("measurement %s recorded twice", x.Name)
		}
		m[x.Name] = x
	}
	return m
}

// sameLimit reports whether two limits are equal, NaN (no limit) included.
func sameLimit(a, b float64) bool { return a == b || math.IsNaN(a) && math.IsNaN(b) }

// seeds is how many noise seeds each unit case runs with.
const seeds = 12

func TestPlanGoodUnitPasses(t *testing.T) {
	levels := demoLevels(t)
	for seed := range uint64(seeds) {
		f := newFake(levels, seed)
		tr, run, err := execute(t, context.Background(), demoConfig(), f)
		if err != nil {
			t.Fatalf("seed %d: Execute: %v", seed, err)
		}
		if run.Verdict != sequences.Pass || run.FailCode != "" {
			t.Fatalf("seed %d: verdict %q code %q, want pass; measurements %+v", seed, run.Verdict, run.FailCode, run.Measurements)
		}
		f.checkSafe(t)

		m := measurements(t, run)
		se := m["trip_se_pf"].Value
		want := []struct {
			name      sequences.Quantity
			step      sequences.StepName
			unit      string
			low, high float64
			ok        func(v float64) bool
		}{
			// Exact: the fake's oscillator runs at exactly 465 Hz.
			{"clock_hz", "clock", "Hz", clockLowHz, clockHighHz, func(v float64) bool { return v == 465 }},
			{"idle_highs", "idle", "count", 0, 0, func(v float64) bool { return v == 0 }},
			// Within 5 standard errors (at least 0.5 pF: 5 × the 0.1 pF SE
			// target) of the fake's true 50 % point.
			{"trip_pf", "trip_search", "pF", tripLowPF, tripHighPF, func(v float64) bool {
				return math.Abs(v-29.7) <= max(0.5, 5*se)
			}},
			{"trip_se_pf", "trip_search", "pF", sequences.NoLimit, sequences.NoLimit, func(v float64) bool {
				return v > 0 && v < 0.5
			}},
			// The fake's true 10–90 % width is 0.64 pF.
			{"spread_pf", "trip_search", "pF", sequences.NoLimit, spreadMaxPF, func(v float64) bool {
				return v > 0 && v <= spreadMaxPF
			}},
			{"release_highs", "release", "count", 0, 0, func(v float64) bool { return v == 0 }},
			// The prior on σ the search used: the variant's default (0.6
			// pF spread, ln-SD 0.7) until 20 passing units are in.
			{"prior_sigma_pf", "trip_search", "pF", sequences.NoLimit, sequences.NoLimit, func(v float64) bool {
				return math.Abs(v-0.6/2.5631031310892007) < 1e-12
			}},
			{"prior_sigma_log_sd", "trip_search", "", sequences.NoLimit, sequences.NoLimit, func(v float64) bool { return v == 0.7 }},
			{"prior_sigma_units", "trip_search", "count", sequences.NoLimit, sequences.NoLimit, func(v float64) bool { return v == 0 }},
			{"prior_sigma_log_units", "trip_search", "count", sequences.NoLimit, sequences.NoLimit, func(v float64) bool { return v == 0 }},
			// The fake's σ is 0.25 pF; the window notes it under the
			// variant's prior.
			{"sigma_ref_pf", "trip_search", "pF", sequences.NoLimit, sequences.NoLimit, func(v float64) bool { return v > 0.1 && v < 0.5 }},
		}
		if len(run.Measurements) != len(want) {
			t.Errorf("seed %d: %d measurements, want %d: %+v", seed, len(run.Measurements), len(want), run.Measurements)
		}
		for _, w := range want {
			got, ok := m[w.name]
			if !ok {
				t.Errorf("seed %d: no %s measurement", seed, w.name)
				continue
			}
			if got.Step != w.step || got.Unit != w.unit || !sameLimit(got.Low, w.low) || !sameLimit(got.High, w.high) {
				t.Errorf("seed %d: %s = %+v, want step %s unit %s limits [%g, %g]", seed, w.name, got, w.step, w.unit, w.low, w.high)
			}
			if got.Verdict != sequences.Pass || !w.ok(got.Value) {
				t.Errorf("seed %d: %s = %g (%s), out of range", seed, w.name, got.Value, got.Verdict)
			}
		}

		// Every phase takes fixture time but power-down, which may find
		// the ladder open already and cut power at once.
		for _, ph := range []string{"power_up", "clock", "idle", sequences.PhaseBracket, sequences.PhaseRefine, "release", "power_down"} {
			if d, ok := tr.Phases[ph]; !ok || d <= 0 && ph != "power_down" {
				t.Errorf("seed %d: phase %s took %v (recorded %v), want > 0 (phases %v)", seed, ph, d, ok, tr.Phases)
			}
		}
		if !run.Started.Equal(epoch) || !run.Finished.Equal(f.clock.Now()) || !run.Finished.After(run.Started) {
			t.Errorf("seed %d: started %v finished %v, want %v and %v", seed, run.Started, run.Finished, epoch, f.clock.Now())
		}
		// The fake's clock moves only inside station operations, so the
		// phases account for every instant of the run.
		var sum time.Duration
		for _, d := range tr.Phases {
			sum += d
		}
		if total := run.Finished.Sub(run.Started); sum != total {
			t.Errorf("seed %d: phases sum to %v, run took %v (%v)", seed, sum, total, tr.Phases)
		}
		if tr.Trip == nil || !tr.Trip.Found || tr.Probes != len(tr.Trip.Probes) {
			t.Errorf("seed %d: trip %+v, probes %d", seed, tr.Trip, tr.Probes)
		}
		if tr.Run() != run {
			t.Errorf("seed %d: trial's run is not the run passed in", seed)
		}
	}
}

func TestPlanFailCodes(t *testing.T) {
	tests := []struct {
		name string
		unit func(f *fakeStation)
		code sequences.FailCode
		step sequences.StepName // the step that fails: the last to record a measurement
	}{
		{"dead oscillator", func(f *fakeStation) { f.ClockHz = 0 }, sequences.CodeClockDead, "clock"},
		{"slow oscillator", func(f *fakeStation) { f.ClockHz = 300 }, sequences.CodeClockLow, "clock"},
		{"fast oscillator", func(f *fakeStation) { f.ClockHz = 700 }, sequences.CodeClockHigh, "clock"},
		{"latch stuck high", func(f *fakeStation) { f.StuckHigh = true }, sequences.CodeIdleLatched, "idle"},
		{"trips below the open ladder", func(f *fakeStation) { f.TripPF = 3 }, sequences.CodeIdleLatched, "idle"},
		{"never trips", func(f *fakeStation) { f.TripPF = 500 }, sequences.CodeNoTrip, "trip_search"},
		{"trips low", func(f *fakeStation) { f.TripPF = 12 }, sequences.CodeTripLow, "trip_search"},
		{"trips high", func(f *fakeStation) { f.TripPF = 55 }, sequences.CodeTripHigh, "trip_search"},
		// σ 3 pF: a 7.7 pF wide transition, far over the 2 pF limit.
		{"wide transition", func(f *fakeStation) { f.SigmaPF = 3 }, sequences.CodeTripNoisy, "trip_search"},
		{"coin-flip latch", func(f *fakeStation) {
			f.LatchFunc = func(c float64) float64 {
				if c < 20 {
					return 0
				}
				return 0.5
			}
		}, sequences.CodeTripNoisy, "trip_search"},
		{"sticky latch", func(f *fakeStation) { f.Sticky = true }, sequences.CodeStuckLatched, "release"},
		// The first failing step wins.
		{"dead oscillator and latch stuck high", func(f *fakeStation) { f.ClockHz, f.StuckHigh = 0, true }, sequences.CodeClockDead, "clock"},
		{"slow oscillator and trips high", func(f *fakeStation) { f.ClockHz, f.TripPF = 300, 55 }, sequences.CodeClockLow, "clock"},
		{"latch stuck high and never trips", func(f *fakeStation) { f.StuckHigh, f.TripPF = true, 500 }, sequences.CodeIdleLatched, "idle"},
	}
	levels := demoLevels(t)
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			for seed := range uint64(seeds) {
				f := newFake(levels, seed)
				tc.unit(f)
				_, run, err := execute(t, context.Background(), demoConfig(), f)
				if err != nil {
					t.Fatalf("seed %d: Execute: %v", seed, err)
				}
				if run.Verdict != sequences.Fail || run.FailCode != tc.code {
					t.Errorf("seed %d: verdict %q code %q, want fail %s", seed, run.Verdict, run.FailCode, tc.code)
				}
				// The plan stops at the failing step: nothing is measured
				// after it.
				if n := len(run.Measurements); n == 0 || run.Measurements[n-1].Step != tc.step {
					t.Errorf("seed %d: measurements %+v, want the last from step %s", seed, run.Measurements, tc.step)
				}
				failed := false
				for _, m := range run.Measurements {
					failed = failed || m.Verdict == sequences.Fail
				}
				// trip_noisy may come from the search's own noise tests with
				// every recorded value inside its limits.
				if !failed && tc.code != sequences.CodeTripNoisy {
					t.Errorf("seed %d: no failing measurement in %+v", seed, run.Measurements)
				}
				f.checkSafe(t)
			}
		})
	}
}

// opFault makes the nth call of op (1-based, counted per operation name)
// run do, and returns do's error.
func opFault(op string, nth int, do func() error) func(int, string) error {
	seen := 0
	return func(_ int, name string) error {
		if name != op {
			return nil
		}
		seen++
		if seen == nth {
			return do()
		}
		return nil
	}
}

func latchPinError() error {
	return &fixture.PinError{Role: "latch", Pin: latchPin, Err: errPinRead}
}

func TestPlanStationFaults(t *testing.T) {
	// Operation order of a good unit: lid, set_pattern(0), power(on),
	// measure_clock, set_pattern(open ladder), sample (idle), then the
	// search's set_pattern/sample pairs, set_pattern + sample (release),
	// set_pattern(0) + power(off) (power down).
	tests := []struct {
		name   string
		setup  func(f *fakeStation)
		cfg    func(c *sequences.PlanConfig)
		code   sequences.FailCode
		is     error  // the error Execute returns wraps this
		prefix string // and starts with this
		pin    bool   // and names the latch pin
	}{
		{name: "lid open", setup: func(f *fakeStation) { f.LidOpen = true },
			code: sequences.CodeLidOpen, is: fixture.ErrLidOpen, prefix: "step power_up: "},
		{name: "lid opened before power on", setup: func(f *fakeStation) {
			f.OpFunc = opFault("power", 1, func() error { f.LidOpen = true; return nil })
		}, code: sequences.CodeLidOpen, is: fixture.ErrLidOpen, prefix: "step power_up: "},
		{name: "lid opened mid-test", setup: func(f *fakeStation) {
			f.OpFunc = opFault("sample", 3, func() error { f.LidOpen = true; return nil })
		}, code: sequences.CodeLidOpen, is: fixture.ErrLidOpen, prefix: "after step "},
		{name: "pin error on the first call", setup: func(f *fakeStation) { f.OpFunc = pinErrorOn(1) },
			code: sequences.CodePinError, is: errPinRead, prefix: "step power_up: ", pin: true},
		{name: "pin error measuring the clock", setup: func(f *fakeStation) {
			f.OpFunc = opFault("measure_clock", 1, latchPinError)
		}, code: sequences.CodePinError, is: errPinRead, prefix: "step clock: ", pin: true},
		{name: "pin error in the idle check", setup: func(f *fakeStation) {
			f.OpFunc = opFault("sample", 1, latchPinError)
		}, code: sequences.CodePinError, is: errPinRead, prefix: "step idle: ", pin: true},
		{name: "pin error in the trip search", setup: func(f *fakeStation) {
			f.OpFunc = opFault("sample", 6, latchPinError)
		}, code: sequences.CodePinError, is: errPinRead, prefix: "step trip_search: ", pin: true},
		{name: "pin error powering down", setup: func(f *fakeStation) {
			f.OpFunc = opFault("power", 2, latchPinError)
		}, code: sequences.CodePinError, is: errPinRead, prefix: "step power_down: ", pin: true},
		{name: "slow relay in the idle check", setup: func(f *fakeStation) {
			f.OpFunc = opFault("set_pattern", 2, func() error { f.clock.Sleep(3 * time.Second); return nil })
		}, code: sequences.CodeStepTimeout, is: sequences.ErrStepTimeout, prefix: "step idle: "},
		{name: "slow power switch", setup: func(f *fakeStation) {
			f.OpFunc = opFault("power", 1, func() error { f.clock.Sleep(3 * time.Second); return nil })
		}, code: sequences.CodeStepTimeout, is: sequences.ErrStepTimeout, prefix: "step power_up: "},
		{name: "slow sample in the trip search", setup: func(f *fakeStation) {
			f.OpFunc = opFault("sample", 4, func() error { f.clock.Sleep(3 * time.Second); return nil })
		}, code: sequences.CodeStepTimeout, is: sequences.ErrStepTimeout, prefix: "step trip_search: "},
		// The step's last operation overruns: the step took longer than
		// its budget even though nothing came after to notice.
		{name: "slow idle sample", setup: func(f *fakeStation) {
			f.OpFunc = opFault("sample", 1, func() error { f.clock.Sleep(3 * time.Second); return nil })
		}, code: sequences.CodeStepTimeout, is: sequences.ErrStepTimeout, prefix: "step idle: "},
		{name: "slow clock measurement", setup: func(f *fakeStation) {
			f.OpFunc = opFault("measure_clock", 1, func() error { f.clock.Sleep(3 * time.Second); return nil })
		}, code: sequences.CodeStepTimeout, is: sequences.ErrStepTimeout, prefix: "step clock: "},
		// StepTimeout 0 takes the 5 s default (plan.go).
		{name: "default budget", setup: func(f *fakeStation) {
			f.OpFunc = opFault("set_pattern", 2, func() error { f.clock.Sleep(5100 * time.Millisecond); return nil })
		}, cfg: func(c *sequences.PlanConfig) { c.StepTimeout = 0 },
			code: sequences.CodeStepTimeout, is: sequences.ErrStepTimeout, prefix: "step idle: "},
	}
	levels := demoLevels(t)
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			f := newFake(levels, 1)
			tc.setup(f)
			cfg := demoConfig()
			if tc.cfg != nil {
				tc.cfg(&cfg)
			}
			_, run, err := execute(t, context.Background(), cfg, f)
			if run.Verdict != sequences.StationFault || run.FailCode != tc.code {
				t.Errorf("verdict %q code %q, want %s %s (err %v)", run.Verdict, run.FailCode, sequences.StationFault, tc.code, err)
			}
			if !errors.Is(err, tc.is) || errors.Is(err, sequences.ErrAborted) {
				t.Errorf("err = %v, want one wrapping %v", err, tc.is)
			}
			var uf *sequences.UnitFailure
			if errors.As(err, &uf) {
				t.Errorf("err = %v wraps a unit failure", err)
			}
			if err != nil && !strings.HasPrefix(err.Error(), tc.prefix) {
				t.Errorf("err = %q, want prefix %q", err, tc.prefix)
			}
			var pe *fixture.PinError
			if tc.pin && (!errors.As(err, &pe) || pe.Pin != latchPin || !strings.Contains(err.Error(), latchPin)) {
				t.Errorf("err = %v, want it to name pin %s", err, latchPin)
			}
			if !f.Halted {
				t.Error("station not halted after a station fault")
			}
			f.checkSafe(t)
		})
	}
}

func TestPlanPanicHaltsStation(t *testing.T) {
	tests := []struct {
		name string
		op   string
		nth  int
	}{
		{"reading the lid", "lid", 1},
		{"measuring the clock", "measure_clock", 1},
		{"sampling in the idle check", "sample", 1},
		{"in the trip search", "sample", 5},
		{"in the release check", "set_pattern", 0}, // nth filled below
		{"powering down", "power", 2},
	}
	levels := demoLevels(t)
	// A good run's set_pattern calls: the release check's is the last but
	// one.
	ref := newFake(levels, 1)
	if _, run, err := execute(t, context.Background(), demoConfig(), ref); err != nil || run.Verdict != sequences.Pass {
		t.Fatalf("reference run: %v %q", err, run.Verdict)
	}
	tests[4].nth = ref.Calls["set_pattern"] - 1
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			f := newFake(levels, 1)
			f.OpFunc = opFault(tc.op, tc.nth, func() error { panic(panicValue) })
			func() {
				defer func() {
					if r := recover(); r != panicValue {
						t.Errorf("recovered %v, want %q", r, panicValue)
					}
				}()
				_, _, _ = execute(t, context.Background(), demoConfig(), f)
				t.Error("Execute returned, want the panic re-raised")
			}()
			if !f.Halted {
				t.Error("station not halted after a panic")
			}
			f.checkSafe(t)
		})
	}
}

func TestPlanCancelled(t *testing.T) {
	tests := []struct {
		name   string
		op     string
		nth    int // 0: cancelled before Execute
		cancel bool
	}{
		{name: "before the run"},
		{name: "during power up", op: "power", nth: 1},
		{name: "during the clock step", op: "measure_clock", nth: 1},
		{name: "during the idle check", op: "sample", nth: 1},
		{name: "during the trip search", op: "sample", nth: 4},
	}
	levels := demoLevels(t)
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			ctx, cancel := context.WithCancel(context.Background())
			defer cancel()
			f := newFake(levels, 1)
			if tc.nth == 0 {
				cancel()
			} else {
				f.OpFunc = opFault(tc.op, tc.nth, func() error { cancel(); return nil })
			}
			_, run, err := execute(t, ctx, demoConfig(), f)
			if !errors.Is(err, sequences.ErrAborted) || !errors.Is(err, context.Canceled) {
				t.Errorf("err = %v, want ErrAborted and context.Canceled", err)
			}
			if run.Verdict != "" || run.FailCode != "" {
				t.Errorf("verdict %q code %q, want none for an aborted run", run.Verdict, run.FailCode)
			}
			if !f.Halted {
				t.Error("station not halted after an abort")
			}
			f.checkSafe(t)
		})
	}
}

func TestPlanWithoutClockPin(t *testing.T) {
	tests := []struct {
		name    string
		unit    func(f *fakeStation)
		verdict sequences.Verdict
		code    sequences.FailCode
	}{
		{"good unit", func(*fakeStation) {}, sequences.Pass, ""},
		// Nothing clocks the flip-flop, and nothing measures the clock: the
		// latch never reads high.
		{"dead oscillator", func(f *fakeStation) { f.ClockHz = 0 }, sequences.Fail, sequences.CodeNoTrip},
	}
	levels := demoLevels(t)
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			f := newFake(levels, 3)
			f.ClockWired = false
			tc.unit(f)
			cfg := demoConfig()
			cfg.ClockPeriods = 0
			tr, run, err := execute(t, context.Background(), cfg, f)
			if err != nil || run.Verdict != tc.verdict || run.FailCode != tc.code {
				t.Errorf("verdict %q code %q err %v, want %q %q", run.Verdict, run.FailCode, err, tc.verdict, tc.code)
			}
			if n := f.Calls["measure_clock"]; n != 0 {
				t.Errorf("clock measured %d times with ClockPeriods 0", n)
			}
			if _, ok := tr.Phases["clock"]; ok {
				t.Errorf("phases %v include a clock step", tr.Phases)
			}
			for _, m := range run.Measurements {
				if m.Step == "clock" || m.Name == "clock_hz" {
					t.Errorf("measurement %+v from a clock step", m)
				}
			}
			f.checkSafe(t)
		})
	}
}

func TestNewPlanRejects(t *testing.T) {
	good := func() []sequences.Level {
		return []sequences.Level{{PF: 4.6, Pattern: 0}, {PF: 5.1, Pattern: 1}, {PF: 5.6, Pattern: 2}}
	}
	tests := []struct {
		name   string
		cfg    func(c *sequences.PlanConfig)
		levels func() []sequences.Level
	}{
		{"one level", nil, func() []sequences.Level { return good()[:1] }},
		{"no levels", nil, func() []sequences.Level { return nil }},
		{"unsorted levels", nil, func() []sequences.Level {
			l := good()
			l[1], l[2] = l[2], l[1]
			return l
		}},
		// The trip search needs strictly ascending levels (ErrSearchLevels):
		// a plan that accepted these would fail every unit.
		{"equal levels", nil, func() []sequences.Level {
			l := good()
			l[2].PF = l[1].PF
			return l
		}},
		{"NaN level", nil, func() []sequences.Level {
			l := good()
			l[1].PF = math.NaN()
			return l
		}},
		{"no period", func(c *sequences.PlanConfig) { c.Period = 0 }, good},
		{"negative period", func(c *sequences.PlanConfig) { c.Period = -time.Millisecond }, good},
		{"no idle periods", func(c *sequences.PlanConfig) { c.IdlePeriods = 0 }, good},
		{"no release periods", func(c *sequences.PlanConfig) { c.ReleasePeriods = 0 }, good},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			cfg := demoConfig()
			if tc.cfg != nil {
				tc.cfg(&cfg)
			}
			if p, err := sequences.NewPlan(cfg, tc.levels()); err == nil {
				t.Errorf("NewPlan accepted it: %+v", p.Levels())
			}
		})
	}
	levels := good()
	p, err := sequences.NewPlan(demoConfig(), levels)
	if err != nil {
		t.Fatalf("NewPlan(good): %v", err)
	}
	if got := p.Levels(); !slices.Equal(got, levels) {
		t.Errorf("Levels() = %v, want %v", got, levels)
	}
}
