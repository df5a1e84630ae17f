package main

import (
	"fmt"
	"math"
	"time"

	"padline/sequences"
	"padline/sequences/timing"
)

// planConfig turns a variant's plan section and its computed limits into
// the plan's parameters. clockWired says whether the station has a clock pin;
// strategy, when not empty, is --search and overrides plan.search.strategy.
func planConfig(v *Variant, rep timing.Report, clockWired bool, strategy string) (sequences.PlanConfig, error) {
	p := v.Plan
	if strategy == "" {
		strategy = p.Search.Strategy
	}
	// "laplace" is the plan as it was before the posterior search: separate
	// clock, idle and release steps and the Laplace refinement, kept to
	// compare against.
	refine, fold := sequences.Posterior, true
	if strategy == searchLaplace {
		strategy, refine, fold = string(sequences.Bracket), sequences.Laplace, false
	}
	if strategy != string(sequences.Bracket) && strategy != string(sequences.Staircase) {
		return sequences.PlanConfig{}, fmt.Errorf("--search %q: want bracket, staircase or %s", strategy, searchLaplace)
	}
	if rep.TestLimits.Low >= rep.TestLimits.High {
		return sequences.PlanConfig{}, fmt.Errorf("variant %s: test limits %.2f … %.2f pF leave nothing to pass: see 'padline limits --variant %s'",
			v.Name, rep.TestLimits.Low, rep.TestLimits.High, v.Name)
	}
	cfg := sequences.PlanConfig{
		PowerSettle:    time.Duration(p.PowerSettleMS * float64(time.Millisecond)),
		IdlePeriods:    p.IdlePeriods,
		ReleasePeriods: p.ReleasePeriods,
		// Without a clock pin a sample waits the slowest period a good
		// unit can have, so every wait spans at least one latch update.
		Period:      time.Duration(math.Ceil(1e9 / rep.Clock.CornerLow)),
		StepTimeout: 5 * time.Second,
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
	return cfg, nil
}

// searchLaplace names the earlier plan for --search.
const searchLaplace = "laplace"

// stationU is the guard band a station applies: its own stated uncertainty,
// else the documented stand-in.
func stationU(st *Station) (u float64, from string) {
	if st.UncertaintyPF > 0 {
		return st.UncertaintyPF, "station file " + st.Source.Name
	}
	return defaultUncertaintyPF, "stand-in (station file states no uncertainty_pf)"
}
