package main

import (
	"bufio"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"runtime/debug"
	"time"

	"github.com/spf13/cobra"
	"github.com/spf13/pflag"

	"padline/sequences/session"
	"padline/store"
	"padline/store/drift"
	"padline/store/driftreport"
)

const driftLong = `drift asks the shift log whether a variant's trip points are moving: a new reel
of sense resistors, another pad laminate, a humid afternoon or a wearing relay
moves them long before units start to fail.

It reads the trip-point series of --variant (oldest first, narrowed by
--since/--until, --station-id, --fixture, --lot, --last N), estimates the centre and σ
from a baseline window (phase I: the first --baseline points, always
printed), applies those limits to the whole series (phase II), and lists the
alarms numbered as on the chart, with the unit index, run time and serial.

Charts (--chart):
  watch    the default watch: individuals with the 3σ limit alone (large
           jumps at once) plus the tabular CUSUM (k = 0.5σ, h = 5σ: small
           steps); in-control ARL about 450 with a 50-point baseline, a 1σ
           step flagged after a median of 9 units (see 'padline drift study')
  imr      individuals and moving range, with the run rules of --rules
  xbar-r   subgroup means and ranges, --subgroup N consecutive units (2…10)
  xbar-s   subgroup means and standard deviations
  ewma     EWMA with exact time-varying limits (--lambda, --width as L)
  cusum    tabular CUSUM (--k, --h in σ)
--rules picks the run rules on the individuals / X̄ chart: we (Western
Electric, default for imr and xbar), nelson, or limits (3σ only; the watch).

Capability Cp/Cpk (σ within subgroups) and Pp/Ppk (overall σ) are against
the variant's test limits, computed as 'padline limits' does from the
variant's configuration (the latest one in the shift log, else the built-in
or file of that name) with the station's uncertainty U (--uncertainty-pf,
else the --station-file station's: the budget its last study stored in the
shift log, else its file's uncertainty_pf; else the stand-in 0.3 pF), the
same U 'padline run' judged with; --lsl/--usl override
them. First-pass yield (each serial's first unit verdict) comes with its
exact Clopper–Pearson 95 % interval.

--by station|fixture|lot|shift|site reports each group on its own (shifts:
early 06–14, late 14–22, night 22–06 local time, named by the day they
start; sites: the board positions of a panel station, one chart per site).
On the plant store also --by line.

--csv FILE --column NAME analyses a column of numbers from a CSV file with a
header row instead (blank cells are skipped); --target, --sigma, --k, --h,
--lambda and --width override what would be estimated.

--svg/--png FILE renders the charts (with --by, one file per group, the
group's name added to FILE). --json prints one JSON object.

The shift log is found as 'padline history' finds it: --db, $PADLINE_DB,
the --station-file's shift_log, else ./` + defaultShiftLog + `. --db
postgres://… reads the plant store: every station's forwarded runs, ordered
by the plant's clock; for one station's runs the numbers are that station's
own log's.`

const driftExample = `  padline drift --variant QM-205
  padline drift --variant QM-205 --since 8h --svg drift.svg
  padline drift --variant QM-205 --by fixture --chart xbar-r --subgroup 5
  padline drift --variant QM-205 --chart ewma --lambda 0.1 --json
  padline drift --csv bench.csv --column trip_pf --target 29.7 --sigma 4.2
  padline drift --db postgres://quality@plant-db/plant --variant QM-205 --by station
  padline drift study --runs 5000`

// driftFlags are the flags of `padline drift`: the report's options and the
// values that reach them only when given.
type driftFlags struct {
	o                                  driftreport.Options
	asJSON                             bool
	station, fixture, lot              string
	target, sigma, k, h, lambda, width float64
}

// driftCmd builds `padline drift` and its `study` subcommand.
func (a *app) driftCmd() *cobra.Command {
	var f driftFlags
	cmd := &cobra.Command{
		Use:     "drift --variant V [filters] | --csv FILE --column NAME",
		Short:   "Watch trip points for drift: control charts, run rules, EWMA/CUSUM, capability, yield",
		Long:    driftLong,
		Example: driftExample,
		Args:    cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			o, err := f.options(cmd)
			if err != nil {
				return err
			}
			return a.drift(cmd, o, f.asJSON)
		},
	}
	f.add(cmd.Flags())
	cmd.AddCommand(a.driftStudyCmd(), a.driftBaselineCmd())
	return cmd
}

// add defines the flags.
func (f *driftFlags) add(fl *pflag.FlagSet) {
	fl.StringVar(new(string), "db", "", "shift log file (default: $PADLINE_DB, the station file's shift_log, else ./"+defaultShiftLog+")")
	fl.StringVar(&f.o.StationFile, "station-file", "", "station file (or built-in name): its shift_log and its uncertainty U")
	fl.StringVar(&f.o.Variant, "variant", "", "variant whose trip points to watch, e.g. QM-205 (or a .yaml file)")
	fl.StringVar(&f.o.Since, "since", "", "from this time on (inclusive): 8h, 2d, 2026-11-30, \"2026-11-30 14:00\"")
	fl.StringVar(&f.o.Until, "until", "", "before this time (exclusive); same forms as --since")
	stationIDFlag(fl, &f.station)
	fl.StringVar(&f.fixture, "fixture", "", "only runs on this fixture")
	fl.StringVar(&f.lot, "lot", "", "only runs of this lot")
	fl.BoolVar(&f.o.IncludeSimulated, "include-simulated", false, "in a log with runs of a real station, also watch simulated runs (left out by default)")
	fl.StringVar(&f.o.By, "by", "", "report each group on its own: station, fixture, lot, shift or site (panel position); plant store: also line")
	fl.IntVar(&f.o.Last, "last", 0, "only the last N trip points (and the runs since the first of them, for yield)")
	fl.BoolVar(&f.o.AllVerdicts, "all-verdicts", false, "chart failed units' trip points too (default: passing units only; yield always counts every unit)")
	fl.StringVar(&f.o.Chart, "chart", "watch", "chart: watch, imr, xbar-r, xbar-s, ewma or cusum")
	fl.StringVar(&f.o.Rules, "rules", "", "run rules on the individuals/X̄ chart: we, nelson or limits (default: we; limits for watch)")
	fl.IntVar(&f.o.Subgroup, "subgroup", 5, "subgroup size for xbar-r and xbar-s (2…10)")
	fl.IntVar(&f.o.Baseline, "baseline", driftreport.DefaultBaseline, "phase I window: limits come from the first N points")
	fl.StringVar(&f.o.SVG, "svg", "", "render the charts to this SVG file")
	fl.StringVar(&f.o.PNG, "png", "", "render the charts to this PNG file")
	fl.BoolVar(&f.asJSON, "json", false, "print one JSON object instead of the report")
	fl.StringVar(&f.o.CSVFile, "csv", "", "analyse a column of this CSV file instead of the shift log")
	fl.StringVar(&f.o.Column, "column", "", "with --csv: the header name of the column to analyse")
	fl.StringVar(&f.o.Keep, "keep", "", "with --csv: a serial on several rows counts once, its first or last row (default: refuse such a file)")
	fl.Float64Var(&f.target, "target", 0, "process centre to use instead of the baseline mean")
	fl.Float64Var(&f.sigma, "sigma", 0, "process σ per unit to use instead of the baseline estimate")
	fl.Float64Var(&f.k, "k", drift.DefaultK, "CUSUM reference value k, in σ")
	fl.Float64Var(&f.h, "h", drift.DefaultH, "CUSUM decision interval h, in σ")
	fl.Float64Var(&f.lambda, "lambda", drift.DefaultLambda, "EWMA weight λ")
	fl.Float64Var(&f.width, "width", 3, fmt.Sprintf("limit half-width in σ (Shewhart; for --chart ewma its L, default %g)", float64(drift.DefaultL)))
	fl.Float64Var(&f.o.UncertaintyPF, "uncertainty-pf", 0, fmt.Sprintf("station's expanded uncertainty U (k = 2), pF: the guard band of the test limits (default: --station-file's U, else the %g pF stand-in)", session.DefaultUncertaintyPF))
	fl.Float64Var(&f.o.LSL, "lsl", 0, "lower limit for capability instead of the variant's test limit")
	fl.Float64Var(&f.o.USL, "usl", 0, "upper limit for capability instead of the variant's test limit")
	fl.IntVar(&f.o.Alarms, "alarms", driftreport.DefaultAlarms, "list at most this many alarms per group, the earliest (0 = all)")
}

// options turns the flags into the report's options, checking each value.
func (f *driftFlags) options(cmd *cobra.Command) (driftreport.Options, error) {
	o, fl := f.o, cmd.Flags()
	err := checkStationAlias(fl, "drift", cmd.ErrOrStderr())
	if err != nil {
		return o, err
	}
	if o.DB, err = shiftLogPath(cmd, o.StationFile); err != nil {
		return o, fmt.Errorf("drift: %w", err)
	}
	if o.UncertaintyGiven = fl.Changed("uncertainty-pf"); !o.UncertaintyGiven {
		o.UncertaintyPF = session.DefaultUncertaintyPF
	}
	if !fl.Changed("lsl") {
		o.LSL = math.NaN()
	}
	if !fl.Changed("usl") {
		o.USL = math.NaN()
	}
	if fl.Changed("target") {
		o.Drift.Target, o.Drift.FixTarget = f.target, true
	}
	for _, s := range []struct {
		name string
		val  float64
		dst  *float64
	}{{"sigma", f.sigma, &o.Drift.Sigma}, {"k", f.k, &o.Drift.K}, {"h", f.h, &o.Drift.H}, {"lambda", f.lambda, &o.Drift.Lambda}, {"width", f.width, &o.Drift.Width}} {
		if !fl.Changed(s.name) {
			continue
		}
		if !(s.val > 0) || math.IsInf(s.val, 0) {
			return o, fmt.Errorf("drift: --%s must be a positive number, got %g", s.name, s.val)
		}
		*s.dst = s.val
	}
	if o.Drift.Lambda > 1 {
		return o, fmt.Errorf("drift: --lambda must be in (0, 1], got %g", o.Drift.Lambda)
	}
	o.OwnBaseline = fl.Changed("baseline") || fl.Changed("target") || fl.Changed("sigma")
	if o.Chart == "ewma" {
		o.Drift.L = o.Drift.Width
	}
	now := time.Now()
	o.Filter = store.Filter{Station: f.station, Fixture: f.fixture, Lot: f.lot}
	if o.Filter.Since, err = store.ParseWhen(o.Since, now); err != nil {
		return o, fmt.Errorf("drift: --since: %w", err)
	}
	if o.Filter.Until, err = store.ParseWhen(o.Until, now); err != nil {
		return o, fmt.Errorf("drift: --until: %w", err)
	}
	return o, o.Check()
}

// drift runs the report and prints it.
func (a *app) drift(cmd *cobra.Command, o driftreport.Options, asJSON bool) error {
	// A soft heap limit while the series is in memory, unless GOMEMLIMIT
	// says otherwise (see driftreport.MemoryLimit).
	if os.Getenv("GOMEMLIMIT") == "" {
		defer debug.SetMemoryLimit(debug.SetMemoryLimit(driftreport.MemoryLimit))
	}
	rep, err := driftreport.Run(cmd.Context(), o)
	if err != nil {
		return err
	}
	if asJSON {
		enc := json.NewEncoder(a.stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(rep)
	}
	out := bufio.NewWriter(a.stdout)
	driftreport.WriteText(out, rep)
	return out.Flush()
}
