package main

import (
	"github.com/spf13/cobra"

	"padline/sequences/demo"
)

// demoCmd builds `padline demo`.
func (a *app) demoCmd() *cobra.Command {
	var (
		o      demo.Options
		asJSON bool
	)
	cmd := &cobra.Command{
		Use:   "demo",
		Short: "Run a simulated shift on the built-in simulated line",
		Long: `demo runs a whole shift of units through the real plan, search and shift log
on a simulated station: no hardware and no files needed.

The built-in demo variant (QM-205, a 5 V touch-lamp dimmer of the fictional
maker Quillmoor Padworks) is tested on the built-in simulated station
(FX-07: 8 reed-relay rungs, 0.5 … 64 pF). Simulated units carry the variant's
component tolerances and, at realistic rates, every kind of unit defect; the
simulator's noise, relay timing and rung calibration error sit at the realism
floor of a real bench, never below it.

The summary gives the yield, the count per fail code, which defects ended in
which fail code, the trip accuracy against the simulator's ground truth on
good units, and fixture time per unit split into fixed steps, bracketing and
refinement, and the search's floor: the fewest samples any search could
expect with the unit's transition known. --compare-search runs the same
units again with the earlier plan (laplace: separate clock, idle and release
checks, guard levels on every unit) and with the plain staircase (one sample
per ladder value from the bottom up) and shows them side by side.

--drift-at N --drift-pf D puts a step into the shift: from unit N on, the
pad laminate changes and the pad capacitance mean drops by D pF, so units
trip D pF higher. --ramp-pf-per-1000 R adds a slow ramp (R pF per 1000
units) from unit N, or from unit 1 with --drift-at 0. Afterwards the default
drift watch (individuals 3σ + CUSUM, limits from the first min(50, N−1)
units) runs over the good units' trip points and the summary gives the
first alarm at or after unit N: chart, rule, unit and lag.

--panel N tests panels of N boards (sites) in one fixture closure on the
built-in simulated panel station (demo-panel: one ganged reed-relay ladder,
each site with its own calibrated capacitors and stray, adjacent pads
coupled through 0.5 pF), one run per site in the shift log. The summary
gives the fixture time per panel against one unit tested alone, the trip
accuracy per site against the simulator's truth, and which injected defect
ended in which fail code on every site. --own-ladders gives every site its
own ladder instead: the sites then search concurrently.`,
		Example: `  padline demo
  padline demo --units 2000 --compare-search
  padline demo --units 100 --json > shift.jsonl
  padline demo --db shift.db && padline history --db shift.db --variant QM-205
  padline demo --units 300 --drift-at 150 --drift-pf 4
  padline demo --panel 8 --units 800`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			o.Software = softwareVersion()
			o.Progress = demo.Bar(a.stderr, asJSON || !isTerminal(a.stderr))
			return demo.Shift(cmd.Context(), a.stdout, o, asJSON)
		},
	}
	f := cmd.Flags()
	f.StringVar(&o.Variant, "variant", "QM-205", "variant to simulate: a built-in name or a .yaml file")
	f.StringVar(&o.Station, "station", "demo-sim", "simulated station: a built-in name or a .yaml file with driver: sim")
	f.IntVar(&o.Units, "units", 500, "number of units in the shift")
	f.Uint64Var(&o.Seed, "seed", 1, "seed of the simulated units and fixture (same seed, same shift)")
	f.StringVar(&o.DB, "db", "", "shift log to write (default: a temporary file, removed afterwards)")
	f.StringVar(&o.Search, "search", "bracket", "trip search: bracket, staircase or laplace (the earlier plan: separate clock, idle and release checks)")
	f.BoolVar(&o.Compare, "compare-search", false, "run the same units with the earlier plan and the staircase too and compare")
	f.BoolVar(&asJSON, "json", false, "print one JSON object per unit, then a summary object")
	f.BoolVar(&o.IntoRealLog, "into-real-log", false, "allow --db to name a shift log that holds runs of a real (gpio) station")
	f.IntVar(&o.Drift.At, "drift-at", 0, "unit from which the pad capacitance drops (trip points step up); 0 = no step")
	f.Float64Var(&o.Drift.StepPF, "drift-pf", 0, "size of the step at --drift-at, pF of trip point")
	f.IntVar(&o.Panel, "panel", 0, "test panels of this many sites (2–32) on the simulated panel station instead of single units")
	f.BoolVar(&o.OwnLadders, "own-ladders", false, "with --panel: every site has its own ladder (default: one ganged ladder)")
	f.Float64Var(&o.Drift.RampPF, "ramp-pf-per-1000", 0, "slow ramp of the trip point, pF per 1000 units, from --drift-at (or unit 1)")
	return cmd
}
