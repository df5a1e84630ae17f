package main

import (
	"bufio"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"runtime/debug"
	"slices"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"padline/sequences"
	"padline/sequences/session"
	"padline/sequences/timing"
	"padline/store"
	"padline/store/drift"
	"padline/store/drift/chart"
)

// driftDefaultBaseline is the phase I window when --baseline is not given:
// the first 50 points (the drift package's own studies use 50).
const driftDefaultBaseline = 50

// driftDefaultAlarms is how many alarms the report lists by default.
const driftDefaultAlarms = 50

// driftMemoryLimit is the Go heap's soft limit while drift runs.
const driftMemoryLimit = 160 << 20

// driftOptions are the parsed flags of `padline drift`.
type driftOptions struct {
	db, stationFile, variant string
	filter                   store.Filter
	withSim                  bool   // --include-simulated
	since, until             string // as given, for the report
	by, chart, rules         string
	subgroup, baseline       int
	svg, png                 string
	asJSON                   bool
	csvFile, column          string
	uncertainty              float64
	uncertaintyFrom          string
	lsl, usl                 float64 // NaN = from the variant
	alarms                   int
	allVerdicts              bool // chart failed units' trip points too
	o                        drift.Options
}

// driftCmd builds `padline drift` and its `study` subcommand.
func (a *app) driftCmd() *cobra.Command {
	var (
		o                                driftOptions
		dbFlag, station, fixtureN, lot   string
		target, sigma, k, h, lambda, wid float64
	)
	cmd := &cobra.Command{
		Use:   "drift --variant V [filters] | --csv FILE --column NAME",
		Short: "Watch trip points for drift: control charts, run rules, EWMA/CUSUM, capability, yield",
		Long: `drift asks the shift log whether a variant's trip points are moving: a new reel
of sense resistors, another pad laminate, a humid afternoon or a wearing relay
moves them long before units start to fail.

It reads the trip-point series of --variant (oldest first, narrowed by
--since/--until, --station, --fixture, --lot), estimates the centre and σ
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

--csv FILE --column NAME analyses a column of numbers from a CSV file with a
header row instead (blank cells are skipped); --target, --sigma, --k, --h,
--lambda and --width override what would be estimated.

--svg/--png FILE renders the charts (with --by, one file per group, the
group's name added to FILE). --json prints one JSON object.

The shift log is found as 'padline history' finds it: --db, $PADLINE_DB,
the --station-file's shift_log, else ./` + defaultShiftLog + `.`,
		Example: `  padline drift --variant QM-205
  padline drift --variant QM-205 --since 8h --svg drift.svg
  padline drift --variant QM-205 --by fixture --chart xbar-r --subgroup 5
  padline drift --variant QM-205 --chart ewma --lambda 0.1 --json
  padline drift --csv bench.csv --column trip_pf --target 29.7 --sigma 4.2
  padline drift study --runs 5000`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			var err error
			if o.db, err = shiftLogPath(cmd, o.stationFile); err != nil {
				return fmt.Errorf("drift: %w", err)
			}
			fl := cmd.Flags()
			if o.stationFile != "" && !fl.Changed("uncertainty-pf") {
				st, err := session.LoadStation(o.stationFile)
				if err != nil {
					return fmt.Errorf("drift: %w", err)
				}
				// The same U padline run judged with: the station's stored
				// budget, else its file, else the stand-in.
				if o.uncertainty, o.uncertaintyFrom, err = session.Uncertainty(cmd.Context(), o.db, st); err != nil {
					return err
				}
			}
			if fl.Changed("uncertainty-pf") {
				o.uncertaintyFrom = "--uncertainty-pf"
			} else if o.uncertaintyFrom == "" {
				o.uncertaintyFrom = "stand-in (no station file)"
			}
			if !fl.Changed("lsl") {
				o.lsl = math.NaN()
			}
			if !fl.Changed("usl") {
				o.usl = math.NaN()
			}
			if fl.Changed("target") {
				o.o.Target, o.o.FixTarget = target, true
			}
			set := func(name string, val float64, dst *float64) error {
				if !fl.Changed(name) {
					return nil
				}
				if !(val > 0) || math.IsInf(val, 0) {
					return fmt.Errorf("drift: --%s must be a positive number, got %g", name, val)
				}
				*dst = val
				return nil
			}
			for _, s := range []struct {
				name string
				val  float64
				dst  *float64
			}{{"sigma", sigma, &o.o.Sigma}, {"k", k, &o.o.K}, {"h", h, &o.o.H}, {"lambda", lambda, &o.o.Lambda}, {"width", wid, &o.o.Width}} {
				if err := set(s.name, s.val, s.dst); err != nil {
					return err
				}
			}
			if o.o.Lambda > 1 {
				return fmt.Errorf("drift: --lambda must be in (0, 1], got %g", o.o.Lambda)
			}
			if o.chart == "ewma" {
				o.o.L = o.o.Width
			}
			now := time.Now()
			o.filter = store.Filter{Station: station, Fixture: fixtureN, Lot: lot}
			if o.filter.Since, err = parseWhen(o.since, now); err != nil {
				return fmt.Errorf("drift: --since: %w", err)
			}
			if o.filter.Until, err = parseWhen(o.until, now); err != nil {
				return fmt.Errorf("drift: --until: %w", err)
			}
			if err := o.check(); err != nil {
				return err
			}
			return a.drift(cmd.Context(), o)
		},
	}
	fl := cmd.Flags()
	fl.StringVar(&dbFlag, "db", "", "shift log file (default: $PADLINE_DB, the station file's shift_log, else ./"+defaultShiftLog+")")
	fl.StringVar(&o.stationFile, "station-file", "", "station file (or built-in name): its shift_log and its uncertainty U")
	fl.StringVar(&o.variant, "variant", "", "variant whose trip points to watch, e.g. QM-205 (or a .yaml file)")
	fl.StringVar(&o.since, "since", "", "from this time on (inclusive): 8h, 2d, 2026-11-30, \"2026-11-30 14:00\"")
	fl.StringVar(&o.until, "until", "", "before this time (exclusive); same forms as --since")
	fl.StringVar(&station, "station", "", "only runs of this station")
	fl.StringVar(&fixtureN, "fixture", "", "only runs on this fixture")
	fl.StringVar(&lot, "lot", "", "only runs of this lot")
	fl.BoolVar(&o.withSim, "include-simulated", false, "in a log with runs of a real station, also watch simulated runs (left out by default)")
	fl.StringVar(&o.by, "by", "", "report each group on its own: station, fixture, lot, shift or site (panel position)")
	fl.BoolVar(&o.allVerdicts, "all-verdicts", false, "chart failed units' trip points too (default: passing units only; yield always counts every unit)")
	fl.StringVar(&o.chart, "chart", "watch", "chart: watch, imr, xbar-r, xbar-s, ewma or cusum")
	fl.StringVar(&o.rules, "rules", "", "run rules on the individuals/X̄ chart: we, nelson or limits (default: we; limits for watch)")
	fl.IntVar(&o.subgroup, "subgroup", 5, "subgroup size for xbar-r and xbar-s (2…10)")
	fl.IntVar(&o.baseline, "baseline", driftDefaultBaseline, "phase I window: limits come from the first N points")
	fl.StringVar(&o.svg, "svg", "", "render the charts to this SVG file")
	fl.StringVar(&o.png, "png", "", "render the charts to this PNG file")
	fl.BoolVar(&o.asJSON, "json", false, "print one JSON object instead of the report")
	fl.StringVar(&o.csvFile, "csv", "", "analyse a column of this CSV file instead of the shift log")
	fl.StringVar(&o.column, "column", "", "with --csv: the header name of the column to analyse")
	fl.Float64Var(&target, "target", 0, "process centre to use instead of the baseline mean")
	fl.Float64Var(&sigma, "sigma", 0, "process σ per unit to use instead of the baseline estimate")
	fl.Float64Var(&k, "k", drift.DefaultK, "CUSUM reference value k, in σ")
	fl.Float64Var(&h, "h", drift.DefaultH, "CUSUM decision interval h, in σ")
	fl.Float64Var(&lambda, "lambda", drift.DefaultLambda, "EWMA weight λ")
	fl.Float64Var(&wid, "width", 3, fmt.Sprintf("limit half-width in σ (Shewhart; for --chart ewma its L, default %g)", float64(drift.DefaultL)))
	fl.Float64Var(&o.uncertainty, "uncertainty-pf", session.DefaultUncertaintyPF, "station's expanded uncertainty U (k = 2), pF: the guard band of the test limits")
	fl.Float64Var(&o.lsl, "lsl", 0, "lower limit for capability instead of the variant's test limit")
	fl.Float64Var(&o.usl, "usl", 0, "upper limit for capability instead of the variant's test limit")
	fl.IntVar(&o.alarms, "alarms", driftDefaultAlarms, "list at most this many alarms per group, the earliest (0 = all)")
	cmd.AddCommand(a.driftStudyCmd())
	return cmd
}

// check validates the flags that do not need the data.
func (o *driftOptions) check() error {
	switch {
	case o.csvFile == "" && o.variant == "":
		return errors.New("drift: give --variant V, or --csv FILE --column NAME (see padline drift --help)")
	case o.csvFile != "" && o.column == "":
		return errors.New("drift: --csv needs --column NAME (the header of the column to analyse)")
	case o.csvFile == "" && o.column != "":
		return errors.New("drift: --column goes with --csv FILE")
	case o.csvFile != "" && o.by != "":
		return errors.New("drift: --by works on the shift log, not on --csv")
	case o.svg != "" && o.png != "":
		return errors.New("drift: give --svg or --png, not both")
	case o.baseline < 2:
		return fmt.Errorf("drift: --baseline must be at least 2 points, got %d", o.baseline)
	case o.alarms < 0:
		return fmt.Errorf("drift: --alarms must be ≥ 0, got %d", o.alarms)
	}
	switch o.by {
	case "", "station", "fixture", "lot", "shift", "site":
	default:
		return fmt.Errorf("drift: --by must be station, fixture, lot, shift or site, got %q", o.by)
	}
	switch o.chart {
	case "watch", "imr", "ewma", "cusum":
	case "xbar-r", "xbar-s":
		if o.subgroup < drift.MinSubgroup || o.subgroup > drift.MaxSubgroup {
			return fmt.Errorf("drift: --subgroup must be %d…%d, got %d", drift.MinSubgroup, drift.MaxSubgroup, o.subgroup)
		}
	default:
		return fmt.Errorf("drift: --chart must be watch, imr, xbar-r, xbar-s, ewma or cusum, got %q", o.chart)
	}
	if _, err := driftRules(o.rules, o.chart); err != nil {
		return err
	}
	return nil
}

// driftRules resolves --rules for a chart.
func driftRules(name, chartKind string) ([]drift.Rule, error) {
	switch name {
	case "":
		if chartKind == "watch" {
			return drift.DefaultSet.Rules, nil
		}
		return drift.WesternElectric, nil
	case "we":
		return drift.WesternElectric, nil
	case "nelson":
		return drift.NelsonRules, nil
	case "limits":
		return drift.LimitsOnly, nil
	}
	return nil, fmt.Errorf("drift: --rules must be we, nelson or limits, got %q", name)
}

// driftSeries is one group's series: values with, when they come from the
// shift log, each point's run id and finish time.
type driftSeries struct {
	key    string
	x      []float64
	runIDs []int64
	times  []int64 // Unix ns
	filter store.Filter
	counts <-chan countsResult // the group's verdict totals, computed alongside
}

// countsResult is one Counts answer.
type countsResult struct {
	c   store.Counts
	err error
}

// driftCountWorkers bounds the Counts queries running at once (each holds
// a SQLite connection).
const driftCountWorkers = 4

// startCounts runs db.Counts(f) in the background, at most
// driftCountWorkers at a time (sem), so the first-pass yield query overlaps
// the trip series read and the charts.
func startCounts(ctx context.Context, db *store.DB, f store.Filter, sem chan struct{}) <-chan countsResult {
	ch := make(chan countsResult, 1)
	go func() {
		sem <- struct{}{}
		defer func() { <-sem }()
		c, err := db.Counts(ctx, f)
		ch <- countsResult{c, err}
	}()
	return ch
}

// driftAnalysis is what analyseSeries finds in one series.
type driftAnalysis struct {
	window drift.Window
	sum    drift.Summary // centre lines, limits, alarm counts and the alarms listed
	charts []drift.Chart // every point, only when the charts are drawn
	cap    *drift.Capability
	capErr error
}

// analyseSeries runs the chosen chart on x with limits from the first
// baseline points, and capability against low/high (NaN = none). The
// report comes from one pass that keeps only the alarms it lists
// (drift.Summarize); the charts with every point are built only when draw
// is set, for the chart file.
func analyseSeries(x []float64, o driftOptions, low, high float64, draw bool) (driftAnalysis, error) {
	var an driftAnalysis
	if len(x) < 2 {
		return an, fmt.Errorf("%d points: too few to chart (need at least 2)", len(x))
	}
	an.window = drift.FirstN(min(o.baseline, len(x)))
	rules, err := driftRules(o.rules, o.chart)
	if err != nil {
		return an, err
	}
	opt := o.o
	opt.Rules = rules
	sub, useS := 1, false
	plan := drift.Plan{Keep: o.alarms, Assess: true}
	switch o.chart {
	case "watch":
		set := drift.DefaultSet
		set.Rules = rules
		plan.Charts = drift.WatchPlan(set, o.alarms).Charts
	case "imr":
		plan.Charts = []drift.Kind{drift.Individuals, drift.MovingRange}
	case "xbar-r":
		sub = o.subgroup
		plan.Charts = []drift.Kind{drift.Xbar, drift.Range}
	case "xbar-s":
		sub, useS = o.subgroup, true
		plan.Charts = []drift.Kind{drift.Xbar, drift.StdDev}
	case "ewma":
		plan.Charts = []drift.Kind{drift.EWMA}
	case "cusum":
		plan.Charts = []drift.Kind{drift.CUSUM}
	}
	plan.Subgroup = sub
	if an.sum, err = drift.Summarize(x, an.window, opt, plan); err != nil {
		return an, err
	}
	if draw {
		if an.charts, err = driftCharts(x, o.chart, sub, an.window, opt, rules); err != nil {
			return an, err
		}
	}
	if math.IsNaN(low) && math.IsNaN(high) {
		an.capErr = errors.New("no limits: give --variant or --lsl/--usl")
	} else if c, err := drift.CapabilityOf(x, sub, useS, low, high); err != nil {
		an.capErr = err
	} else {
		an.cap = &c
	}
	return an, nil
}

// driftCharts builds the charts of kind with every point, for drawing.
func driftCharts(x []float64, kind string, sub int, w drift.Window, opt drift.Options, rules []drift.Rule) ([]drift.Chart, error) {
	switch kind {
	case "watch":
		set := drift.DefaultSet
		set.Rules = rules
		wt, err := drift.WatchSeries(x, w, opt, set)
		return wt.Charts, err
	case "imr", "xbar-r", "xbar-s":
		var (
			s   drift.Shewhart
			err error
		)
		switch kind {
		case "imr":
			s, err = drift.IndividualsChart(x, w, opt)
		case "xbar-r":
			s, err = drift.XbarRChart(x, sub, w, opt)
		default:
			s, err = drift.XbarSChart(x, sub, w, opt)
		}
		return []drift.Chart{s.Location, s.Spread}, err
	}
	var (
		c   drift.Chart
		err error
	)
	if kind == "ewma" {
		c, err = drift.EWMAChart(x, w, opt)
	} else {
		c, err = drift.CUSUMChart(x, w, opt)
	}
	return []drift.Chart{c}, err
}

// drift runs the command.
func (a *app) drift(ctx context.Context, o driftOptions) error {
	// A million points and their charts fit well inside 200 MB; a soft
	// limit keeps the collector from letting garbage double the heap
	// (unless GOMEMLIMIT says otherwise).
	if os.Getenv("GOMEMLIMIT") == "" {
		defer debug.SetMemoryLimit(debug.SetMemoryLimit(driftMemoryLimit))
	}

	rep := driftReport{Chart: o.chart, Baseline: o.baseline, UncertaintyPF: jnum(math.NaN())}
	low, high := o.lsl, o.usl
	var groups []driftSeries
	var db *store.DB
	if o.csvFile != "" {
		x, err := readSeriesCSV(o.csvFile, o.column)
		if err != nil {
			return fmt.Errorf("drift: %w", err)
		}
		rep.Source = fmt.Sprintf("CSV %s, column %s", o.csvFile, o.column)
		groups = []driftSeries{{x: x}}
	} else {
		if _, err := os.Stat(o.db); errors.Is(err, fs.ErrNotExist) {
			return fmt.Errorf("drift: no shift log at %s (give --db PATH, set PADLINE_DB, or --station-file)", o.db)
		}
		var err error
		db, err = store.Open(o.db)
		if err != nil {
			return fmt.Errorf("drift: %w", err)
		}
		defer db.Close()
		if o.filter.Driver, err = session.DriverFilter(ctx, db, o.withSim); err != nil {
			return fmt.Errorf("drift: %w", err)
		}
		rep.Source = "shift log " + o.db
		rep.Since, rep.Until = o.since, o.until
		rep.Station, rep.Fixture, rep.Lot, rep.By = o.filter.Station, o.filter.Fixture, o.filter.Lot, o.by
	}
	if o.variant != "" {
		v, from, err := session.VariantFor(ctx, db, o.variant)
		switch {
		case err != nil && o.csvFile != "":
			return fmt.Errorf("drift: %w", err)
		case err != nil:
			// Runs of a variant this program has no file for: the trip
			// series is still there, capability needs --lsl/--usl.
			rep.Variant = o.variant
			rep.LimitsFrom = "none: " + err.Error()
		default:
			rep.Variant = v.Name
			lr, err := v.Limits(timing.Options{Draws: timing.DefaultDraws, Seed: 1, UncertaintyPF: o.uncertainty})
			if err != nil {
				return fmt.Errorf("drift: %w", err)
			}
			if math.IsNaN(low) {
				low = lr.TestLimits.Low
			}
			if math.IsNaN(high) {
				high = lr.TestLimits.High
			}
			rep.UncertaintyPF = jnum(o.uncertainty)
			rep.LimitsFrom = fmt.Sprintf("variant %s from %s, U %.2f pF (%s)", v.Name, from, o.uncertainty, o.uncertaintyFrom)
		}
	}
	if !math.IsNaN(o.lsl) || !math.IsNaN(o.usl) {
		rep.LimitsFrom = "--lsl/--usl"
		if !math.IsNaN(o.lsl) && !math.IsNaN(o.usl) && o.lsl >= o.usl {
			return fmt.Errorf("drift: --lsl %g must be below --usl %g", o.lsl, o.usl)
		}
	}
	rep.Limits = [2]jnum{jnum(low), jnum(high)}
	if db != nil {
		o.filter.Variant = rep.Variant
		ctx, cancel := context.WithCancel(ctx)
		defer cancel() // stops Counts queries nobody waits for after an error
		sem := make(chan struct{}, driftCountWorkers)
		var whole <-chan countsResult
		if o.by == "" {
			whole = startCounts(ctx, db, o.filter, sem)
		}
		var err error
		if groups, err = driftGroups(ctx, db, o.filter, o.by, o.allVerdicts); err != nil {
			return fmt.Errorf("drift: %w", err)
		}
		if len(groups) == 0 {
			return fmt.Errorf("drift: no trip points of %s in %s%s", rep.Variant, o.db, describeFilter(o))
		}
		for i := range groups {
			if whole != nil {
				groups[i].counts = whole
			} else {
				groups[i].counts = startCounts(ctx, db, groups[i].filter, sem)
			}
		}
	}
	for _, g := range groups {
		gr, err := a.driftGroup(ctx, db, o, g, low, high)
		if err != nil {
			if o.by != "" {
				err = fmt.Errorf("%s %s: %w", o.by, g.key, err)
			}
			return fmt.Errorf("drift: %w", err)
		}
		rep.Groups = append(rep.Groups, gr)
	}
	rep.Verdict = topVerdict(o.by, rep.Groups)
	if o.asJSON {
		enc := json.NewEncoder(a.stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(rep)
	}
	out := bufio.NewWriter(a.stdout)
	writeDriftReport(out, rep)
	return out.Flush()
}

// describeFilter states the filters for a "nothing found" message.
func describeFilter(o driftOptions) string {
	var parts []string
	for _, p := range [][2]string{{"since", o.since}, {"until", o.until}, {"station", o.filter.Station}, {"fixture", o.filter.Fixture}, {"lot", o.filter.Lot}} {
		if p[1] != "" {
			parts = append(parts, p[0]+" "+p[1])
		}
	}
	if len(parts) == 0 {
		return ""
	}
	return " (" + strings.Join(parts, ", ") + ")"
}

// driftGroups reads the trip series and splits it by the --by key, groups
// in key order (shift keys sort by time).
func driftGroups(ctx context.Context, db *store.DB, f store.Filter, by string, allVerdicts bool) ([]driftSeries, error) {
	// A unit that failed has a defect, a special cause the limits already
	// caught: by default only passing units feed the charts, so one bad
	// unit does not read as the process moving. f itself (every verdict)
	// stays the groups' filter, for their yield.
	sf := f
	if !allVerdicts {
		sf.Verdict = sequences.Pass
	}
	// The points stream from the store into compact arrays, 24 bytes a
	// point; station, fixture and lot are read only when --by needs them.
	var out []driftSeries
	idx := map[string]int{}
	for p, err := range db.Trips(ctx, sf, by != "" && by != "shift") {
		if err != nil {
			return nil, err
		}
		key, i := "", 0
		if by != "" {
			var gf store.Filter
			key, gf = driftKey(p, by, f)
			var ok bool
			if i, ok = idx[key]; !ok {
				i = len(out)
				idx[key] = i
				out = append(out, driftSeries{key: key, filter: gf})
			}
		} else if len(out) == 0 {
			out = append(out, driftSeries{filter: f})
		}
		g := &out[i]
		g.x = append(g.x, p.TripPF)
		g.runIDs = append(g.runIDs, p.RunID)
		g.times = append(g.times, p.Finished.UnixNano())
	}
	slices.SortStableFunc(out, func(a, b driftSeries) int { return strings.Compare(a.key, b.key) })
	return out, nil
}

// driftKey is a point's group under --by, and the filter that selects the
// group's runs (for its yield).
func driftKey(p store.TripPoint, by string, f store.Filter) (string, store.Filter) {
	switch by {
	case "station":
		f.Station = p.Station
		return p.Station, f
	case "fixture":
		f.Fixture = p.Fixture
		return p.Fixture, f
	case "lot":
		f.Lot = p.Lot
		return p.Lot, f
	case "site":
		// Units tested alone form their own group.
		if p.Site == 0 {
			f.Site = -1
			return "none (units tested alone)", f
		}
		f.Site = p.Site
		return fmt.Sprintf("%02d", p.Site), f
	}
	name, start, end := shiftOf(p.Finished.Local())
	if f.Since.IsZero() || f.Since.Before(start) {
		f.Since = start
	}
	if f.Until.IsZero() || f.Until.After(end) {
		f.Until = end
	}
	return name, f
}

// shiftOf names the shift t falls in (early 06–14, late 14–22, night
// 22–06, dated by the day it starts) and gives its bounds, in t's zone.
func shiftOf(t time.Time) (name string, start, end time.Time) {
	day := time.Date(t.Year(), t.Month(), t.Day(), 0, 0, 0, 0, t.Location())
	h := t.Hour()
	var which string
	switch {
	case h < 6:
		day = day.AddDate(0, 0, -1)
		which, start = "night", day.Add(22*time.Hour)
	case h < 14:
		which, start = "early", day.Add(6*time.Hour)
	case h < 22:
		which, start = "late", day.Add(14*time.Hour)
	default:
		which, start = "night", day.Add(22*time.Hour)
	}
	return day.Format("2006-01-02") + " " + which, start, start.Add(8 * time.Hour)
}

// driftGroup analyses one group and assembles its report.
func (a *app) driftGroup(ctx context.Context, db *store.DB, o driftOptions, g driftSeries, low, high float64) (driftGroupReport, error) {
	gr := driftGroupReport{Key: g.key, Points: len(g.x)}
	if len(g.times) > 0 {
		gr.First, gr.Last = tptr(g.times[0]), tptr(g.times[len(g.times)-1])
	}
	path := driftChartPath(o, g.key)
	an, err := analyseSeries(g.x, o, low, high, path != "")
	if err != nil {
		return gr, err
	}
	w := an.window
	if len(g.times) > 0 {
		w.From, w.To = time.Unix(0, g.times[w.Start]), time.Unix(0, g.times[w.End-1])
	}
	gr.Baseline = driftWindowJSON{FirstUnit: w.Start + 1, LastUnit: w.End, Points: w.Len(), Text: w.String()}
	if len(g.times) > 0 {
		gr.Baseline.From, gr.Baseline.To = &w.From, &w.To
	}
	for _, c := range an.sum.Charts {
		gr.Charts = append(gr.Charts, chartJSON(c))
	}
	gr.AlarmCount = an.sum.Alarms
	gr.Verdict = driftVerdict(ctx, db, o, g, an)
	shown := an.sum.First
	if o.alarms > 0 && len(shown) > o.alarms {
		shown = shown[:o.alarms] // the earliest: when the drift began
	}
	for _, al := range shown {
		aj := driftAlarmJSON{Seq: al.Seq, Chart: string(al.Chart), Rule: string(al.Rule), Description: al.Description(),
			Unit: al.Unit + 1, Point: al.Index + 1, Side: al.Side, Note: al.Note}
		if al.Onset >= 0 && al.Chart == drift.CUSUM {
			aj.OnsetUnit = al.Onset + 1
			if al.Onset < len(g.runIDs) && db != nil {
				at := time.Unix(0, g.times[al.Onset])
				aj.Note = onsetNote(al, pointName(runAt(ctx, db, g.filter.Variant, g.runIDs[al.Onset], at).Serial, at, false))
			}
		}
		if al.Unit < len(g.runIDs) {
			aj.RunID = g.runIDs[al.Unit]
			aj.Time = tptr(g.times[al.Unit])
			if db != nil {
				aj.Serial = runSerial(ctx, db, g.filter.Variant, aj.RunID, *aj.Time)
			}
		}
		gr.Alarms = append(gr.Alarms, aj)
	}
	if an.cap != nil {
		c := an.cap
		gr.Capability = &capabilityJSON{N: c.N, Low: jnum(c.Low), High: jnum(c.High), Mean: jnum(c.Mean),
			SigmaWithin: jnum(c.SigmaWithin), SigmaOverall: jnum(c.SigmaOverall), Method: c.Method,
			Cp: jnum(c.Cp), Cpk: jnum(c.Cpk), Pp: jnum(c.Pp), Ppk: jnum(c.Ppk)}
	} else {
		gr.CapabilityNote = an.capErr.Error()
	}
	if g.counts != nil {
		res := <-g.counts
		cnt, err := res.c, res.err
		if err != nil {
			return gr, err
		}
		gr.Runs = cnt.Runs
		if cnt.FirstUnits > 0 {
			y, err := drift.FirstPassYield(int(cnt.FirstPass), int(cnt.FirstUnits), 0.95)
			if err != nil {
				return gr, err
			}
			gr.Yield = &yieldJSON{Pass: y.Pass, Total: y.Total, Rate: jnum(y.Rate), Low: jnum(y.Low), High: jnum(y.High), Confidence: y.Confidence}
		}
	}
	if path != "" {
		title := "trip point"
		if o.variant != "" {
			title = o.variant + " trip point"
		}
		if g.key != "" {
			title += " — " + o.by + " " + g.key
		}
		unit := "pF"
		if o.csvFile != "" {
			title, unit = o.column, ""
		}
		copts := chart.Options{Title: title + " (" + driftChartTitle(o.chart) + ")", Quantity: "trip point", Unit: unit}
		if o.csvFile != "" {
			copts.Quantity = o.column
		}
		if err := chart.WriteFile(path, copts, an.charts...); err != nil {
			return gr, err
		}
		gr.ChartFile = path
	}
	return gr, nil
}

func driftChartTitle(kind string) string {
	if kind == "watch" {
		return "default watch"
	}
	return kind
}

// driftChartPath is the chart file of a group: --svg/--png as given, with
// the group's name before the extension under --by.
func driftChartPath(o driftOptions, key string) string {
	path := o.svg
	if path == "" {
		path = o.png
	}
	if path == "" || key == "" {
		return path
	}
	ext := filepath.Ext(path)
	safe := strings.Map(func(r rune) rune {
		if r == '-' || r == '_' || r == '.' || (r >= '0' && r <= '9') || (r >= 'a' && r <= 'z') || (r >= 'A' && r <= 'Z') {
			return r
		}
		return '_'
	}, key)
	return strings.TrimSuffix(path, ext) + "-" + safe + ext
}

// runSerial looks up the serial of one run (found by its finish time, an
// indexed range of one nanosecond); "" when it cannot be found.
func runSerial(ctx context.Context, db *store.DB, variant string, id int64, at time.Time) string {
	for e, err := range db.Runs(ctx, store.Filter{Variant: variant, Since: at, Until: at.Add(1)}) {
		if err != nil {
			return ""
		}
		if e.ID == id {
			return e.Serial
		}
	}
	return ""
}

func tptr(ns int64) *time.Time {
	t := time.Unix(0, ns)
	return &t
}
