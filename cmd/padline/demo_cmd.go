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
	cmd := withHelp("demo", &cobra.Command{
		Use:   "demo",
		Short: "Run a simulated shift on the built-in simulated line",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			o.Software = softwareVersion()
			o.Progress = demo.Bar(a.stderr, asJSON || !isTerminal(a.stderr))
			return demo.Shift(cmd.Context(), a.stdout, o, asJSON)
		},
	})
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
