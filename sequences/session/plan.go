package session

import (
	"fmt"
	"math"
	"time"

	"padline/sequences"
	"padline/sequences/timing"
)

// PlanConfig turns a variant's plan section and its computed limits into
// the plan's parameters. clockWired says whether the station has a clock pin;
// strategy, when not empty, is --search and overrides plan.search.strategy.
func PlanConfig(v *Variant, rep timing.Report, clockWired bool, strategy string) (sequences.PlanConfig, error) {
	p := v.Plan
	if strategy == "" {
		strategy = p.Search.Strategy
	}
	// "laplace" is the plan as it was before the posterior search: separate
	// clock, idle and release steps and the Laplace refinement, kept to
	// compare against.
	refine, fold := sequences.Posterior, true
	if strategy == SearchLaplace {
		strategy, refine, fold = string(sequences.Bracket), sequences.Laplace, false
	}
	if strategy != string(sequences.Bracket) && strategy != string(sequences.Staircase) {
		return sequences.PlanConfig{}, fmt.Errorf("--search %q: want bracket, staircase or %s", strategy, SearchLaplace)
	}
	if rep.TestLimits.Low >= rep.TestLimits.High {
		return sequences.PlanConfig{}, fmt.Errorf("variant %s: test limits %.2f … %.2f pF leave nothing to pass: see 'padline limits --variant %s'",
			v.Name, rep.TestLimits.Low, rep.TestLimits.High, v.Name)
	}
	period := time.Duration(math.Ceil(1e9 / rep.Clock.CornerLow))
	settle := time.Duration(p.PowerSettleMS * float64(time.Millisecond))
	cfg := sequences.PlanConfig{
		PowerSettle:    settle,
		IdlePeriods:    p.IdlePeriods,
		ReleasePeriods: p.ReleasePeriods,
		// Without a clock pin a sample waits the slowest period a good
		// unit can have, so every wait spans at least one latch update.
		Period:      period,
		StepTimeout: StepBudget(settle, period, max(p.IdlePeriods, p.ReleasePeriods+2, p.ClockPeriods+4)),
		FoldChecks:  fold,
		Search: sequences.SearchOptions{
			Strategy:         sequences.Strategy(strategy),
			Refine:           refine,
			SETargetPF:       p.Search.SETargetPF,
			MaxRefineSamples: p.Search.MaxRefineSamples,
		},
		Limits: sequences.Limits{
			TripLowPF: rep.TestLimits.Low, TripHighPF: rep.TestLimits.High,
			ClockLowHz: rep.Clock.CornerLow, ClockHighHz: rep.Clock.CornerHigh,
			SpreadMaxPF: p.Search.SpreadLimitPF,
		},
	}
	if clockWired {
		cfg.ClockPeriods = p.ClockPeriods
	}
	// The posterior search starts from the variant's predicted trip
	// distribution (the timing model's Monte Carlo, 'padline limits').
	if refine == sequences.Posterior && rep.Trip.MCSD > 0 && !math.IsNaN(rep.Trip.MCMean) {
		cfg.Search.TripPriorPF, cfg.Search.TripPriorSDPF = rep.Trip.MCMean, rep.Trip.MCSD
	}
	return cfg, nil
}

// SearchLaplace names the earlier plan for --search: separate clock, idle
// and release steps and the Laplace refinement.
const SearchLaplace = "laplace"

// baseStepBudget is the fixed part of every step's budget: the trip
// search's probes and the fixture's own waits (common practice, no source:
// well above the slowest search the demo line shows).
const baseStepBudget = 5 * time.Second

// StepBudget is each step's fixture-time budget, derived from the plan: the
// fixed part plus twice the longest step the plan asks for (the power
// settle, or the most clock periods one step samples at the slowest good
// clock), so a plan with a long settle or many periods is not failed as a
// station fault, and a stuck step still ends.
func StepBudget(settle, period time.Duration, periods int) time.Duration {
	longest := max(settle, time.Duration(periods)*period)
	return baseStepBudget + 2*longest
}

// StatedUncertainty is the guard band a station applies: its own stated uncertainty,
// else the documented stand-in.
func StatedUncertainty(st *Station) (u float64, from string) {
	if st.UncertaintyPF > 0 {
		return st.UncertaintyPF, "station file " + st.Source.Name
	}
	return DefaultUncertaintyPF, "stand-in (station file states no uncertainty_pf)"
}

// DefaultUncertaintyPF is U (k = 2) when neither --uncertainty-pf nor a
// station gives one: a stand-in until the station's own uncertainty budget
// (rung calibration, ladder resolution, repeatability) is computed. The demo
// ladder's 0.5 pF step alone contributes u = 0.5/√12 = 0.14 pF (GUM), so
// U = 2u ≈ 0.3 pF.
const DefaultUncertaintyPF = 0.3
