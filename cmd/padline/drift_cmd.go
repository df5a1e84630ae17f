package main

import (
	"bufio"
	"encoding/json"
	"fmt"
	"os"
	"runtime/debug"
	"time"

	"github.com/spf13/cobra"
	"github.com/spf13/pflag"

	"padline/sequences/session"
	"padline/store/drift"
	"padline/store/driftreport"
)

// driftFlags are the flags of `padline drift`: the report's options and the
// values that reach them only when given.
type driftFlags struct {
	o      driftreport.Options
	t      driftreport.Tuning
	asJSON bool
}

// driftCmd builds `padline drift` with its `study` and `baseline` subcommands.
func (a *app) driftCmd() *cobra.Command {
	var f driftFlags
	cmd := &cobra.Command{
		Use:     "drift --variant V [filters] | --csv FILE --column NAME",
		Short:   "Watch trip points for drift: control charts, run rules, EWMA/CUSUM, capability, yield",
		Long:    driftreport.Help,
		Example: driftreport.Example,
		Args:    cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			o := f.o
			err := checkStationAlias(cmd.Flags(), "drift", cmd.ErrOrStderr())
			if err != nil {
				return err
			}
			if o.DB, err = shiftLogPath(cmd, o.StationFile); err != nil {
				return err
			}
			if err := o.Apply(f.t, cmd.Flags().Changed, time.Now()); err != nil {
				return err
			}
			// A soft heap limit while the series is in memory, unless
			// GOMEMLIMIT says otherwise (see driftreport.MemoryLimit).
			if os.Getenv("GOMEMLIMIT") == "" {
				defer debug.SetMemoryLimit(debug.SetMemoryLimit(driftreport.MemoryLimit))
			}
			rep, err := driftreport.Run(cmd.Context(), o)
			if err != nil {
				return err
			}
			if f.asJSON {
				enc := json.NewEncoder(a.stdout)
				enc.SetIndent("", "  ")
				return enc.Encode(rep)
			}
			out := bufio.NewWriter(a.stdout)
			driftreport.WriteText(out, rep)
			return out.Flush()
		},
	}
	f.add(cmd.Flags())
	cmd.AddCommand(a.driftStudyCmd(), a.driftBaselineCmd())
	return cmd
}

// add defines the flags.
func (f *driftFlags) add(fl *pflag.FlagSet) {
	addShiftLogFlag(fl)
	fl.Lookup("db").Usage = plantOrLog
	fl.StringVar(&f.o.StationFile, "station-file", "", "station file (or built-in name): its shift_log and its uncertainty U")
	fl.StringVar(&f.o.Variant, "variant", "", "variant whose trip points to watch, e.g. QM-205 (or a .yaml file)")
	fl.StringVar(&f.o.Since, "since", "", "from this time on (inclusive): 8h, 2d, 2026-11-30, \"2026-11-30 14:00\"")
	fl.StringVar(&f.o.Until, "until", "", "before this time (exclusive); same forms as --since")
	stationIDFlag(fl, &f.t.Station)
	fl.StringVar(&f.t.Fixture, "fixture", "", "only runs on this fixture")
	fl.StringVar(&f.t.Lot, "lot", "", "only runs of this lot")
	fl.BoolVar(&f.o.IncludeSimulated, "include-simulated", false, "in a log with runs of a real station, also watch simulated runs (left out by default)")
	fl.StringVar(&f.o.By, "by", "", "report each group on its own: station, fixture, lot, shift or site (panel position); plant store: also line")
	fl.IntVar(&f.o.Last, "last", 0, "only the last N trip points (and the runs since the first of them, for yield)")
	fl.BoolVar(&f.o.AllVerdicts, "all-verdicts", false, "chart failed units' trip points too (default: passing units only; yield always counts every unit)")
	fl.StringVar(&f.o.Chart, "chart", "watch", "chart: watch, imr, xbar-r, xbar-s, ewma or cusum")
	fl.StringVar(&f.o.Rules, "rules", "", "run rules on the individuals/X̄ chart: we, nelson or limits (default: we; limits for watch)")
	fl.IntVar(&f.o.Subgroup, "subgroup", 5, "subgroup size for xbar-r and xbar-s (2…10)")
	fl.IntVar(&f.o.Baseline, "baseline", driftreport.DefaultBaseline, "phase I window: limits come from the first N points")
	fl.StringVar(&f.o.SVG, "svg", "", "render the charts to this SVG file")
	fl.StringVar(&f.o.PNG, "png", "", "render the charts to this PNG file (with --svg too: both)")
	fl.StringVar(&f.o.X, "x", "time", "charts' x axis: time (shift changes marked), serial or point")
	fl.BoolVar(&f.asJSON, "json", false, "print one JSON object instead of the report")
	fl.StringVar(&f.o.CSVFile, "csv", "", "analyse a column of this CSV file instead of the shift log")
	fl.StringVar(&f.o.Column, "column", "", "with --csv: the header name of the column to analyse")
	fl.StringVar(&f.o.Keep, "keep", "", "with --csv: a serial on several rows counts once, its first or last row (default: refuse such a file)")
	fl.Float64Var(&f.t.Target, "target", 0, "process centre to use instead of the baseline mean")
	fl.Float64Var(&f.t.Sigma, "sigma", 0, "process σ per unit to use instead of the baseline estimate")
	fl.Float64Var(&f.t.K, "k", drift.DefaultK, "CUSUM reference value k, in σ")
	fl.Float64Var(&f.t.H, "h", drift.DefaultH, "CUSUM decision interval h, in σ")
	fl.Float64Var(&f.t.Lambda, "lambda", drift.DefaultLambda, "EWMA weight λ")
	fl.Float64Var(&f.t.Width, "width", 3, "limit half-width in σ (Shewhart; for --chart ewma its L)")
	fl.Float64Var(&f.o.UncertaintyPF, "uncertainty-pf", 0, fmt.Sprintf("station's expanded uncertainty U (k = 2), pF: the guard band of the test limits (default: --station-file's U, else the %g pF stand-in)", session.DefaultUncertaintyPF))
	fl.Float64Var(&f.o.LSL, "lsl", 0, "lower limit for capability instead of the variant's test limit")
	fl.Float64Var(&f.o.USL, "usl", 0, "upper limit for capability instead of the variant's test limit")
	fl.IntVar(&f.o.Alarms, "alarms", driftreport.DefaultAlarms, "list at most this many alarms per group, the earliest (0 = all)")
}
