package driftreport

import (
	"context"
	"errors"
	"fmt"
	"iter"
	"math"
	"runtime"
	"slices"
	"strconv"
	"strings"
	"sync"
	"time"

	"padline/sequences"
	"padline/sequences/session"
	"padline/store"
	"padline/store/drift"
	"padline/store/drift/chart"
	"padline/store/plant"
)

// DefaultBaseline is the phase I window when --baseline is not given:
// the first 50 points (the drift package's own studies use 50).
const DefaultBaseline = 50

// DefaultAlarms is how many alarms the report lists by default.
const DefaultAlarms = 50

// MemoryLimit is the Go heap's soft limit while drift runs.
const MemoryLimit = 160 << 20

// Options are what `padline drift` asks for, its flags parsed.
type Options struct {
	// DB is the shift log's path (resolved by the caller).
	DB string
	// StationFile, when set and UncertaintyGiven is false, gives the
	// station whose uncertainty U judges capability: the budget its last
	// study stored in the shift log, else its file's uncertainty_pf.
	StationFile string
	// Variant whose trip points to watch (a name or a .yaml file).
	Variant          string
	Filter           store.Filter
	IncludeSimulated bool   // also simulated runs in a log with real ones
	Since, Until     string // as given, for the report
	By, Chart, Rules string
	Subgroup         int
	Baseline         int
	SVG, PNG         string
	X                string // chart x axis: time, serial or point ("": time)
	CSVFile, Column  string
	// Keep says which row of a serial on several CSV rows counts: "first"
	// or "last" ("": refuse such a file).
	Keep             string
	UncertaintyPF    float64
	UncertaintyFrom  string
	UncertaintyGiven bool    // UncertaintyPF came from the command line
	LSL, USL         float64 // NaN = from the variant
	Alarms           int
	AllVerdicts      bool // chart failed units' trip points too
	Last             int  // only the last N trip points (0: all)
	// OwnBaseline: --baseline, --target or --sigma given, so no approved
	// baseline is used.
	OwnBaseline bool
	approved    *store.Baseline
	Drift       drift.Options
}

// Check validates the options that do not need the data.
func (o *Options) Check() error {
	switch {
	case o.CSVFile == "" && o.Variant == "":
		return errors.New("drift: give --variant V, or --csv FILE --column NAME (see padline drift --help)")
	case o.CSVFile != "" && o.Column == "":
		return errors.New("drift: --csv needs --column NAME (the header of the column to analyse)")
	case o.Keep != "" && o.Keep != "first" && o.Keep != "last":
		return fmt.Errorf("drift: --keep must be first or last, got %q", o.Keep)
	case o.CSVFile == "" && o.Column != "":
		return errors.New("drift: --column goes with --csv FILE")
	case o.CSVFile != "" && o.By != "":
		return errors.New("drift: --by works on the shift log, not on --csv")
	case o.X != "" && o.X != "time" && o.X != "serial" && o.X != "point":
		return fmt.Errorf("drift: --x must be time, serial or point, got %q", o.X)
	case o.Last < 0:
		return fmt.Errorf("drift: --last must be ≥ 0, got %d", o.Last)
	case o.Last > 0 && o.CSVFile != "":
		return errors.New("drift: --last works on the shift log, not on --csv")
	case o.Baseline < 2:
		return fmt.Errorf("drift: --baseline must be at least 2 points, got %d", o.Baseline)
	case o.Alarms < 0:
		return fmt.Errorf("drift: --alarms must be ≥ 0, got %d", o.Alarms)
	}
	switch o.By {
	case "", "station", "fixture", "lot", "shift", "site":
	case "line":
		if !plant.IsURL(o.DB) {
			return fmt.Errorf("drift: --by line needs the plant store (--db postgres://…): a station's shift log knows no lines")
		}
	default:
		return fmt.Errorf("drift: --by must be station, fixture, lot, shift, site or line, got %q", o.By)
	}
	switch o.Chart {
	case "watch", "imr", "ewma", "cusum":
	case "xbar-r", "xbar-s":
		if o.Subgroup < drift.MinSubgroup || o.Subgroup > drift.MaxSubgroup {
			return fmt.Errorf("drift: --subgroup must be %d…%d, got %d", drift.MinSubgroup, drift.MaxSubgroup, o.Subgroup)
		}
	default:
		return fmt.Errorf("drift: --chart must be watch, imr, xbar-r, xbar-s, ewma or cusum, got %q", o.Chart)
	}
	if _, err := RulesFor(o.Rules, o.Chart); err != nil {
		return err
	}
	return nil
}

// RulesFor resolves --rules for a chart.
func RulesFor(name, chartKind string) ([]drift.Rule, error) {
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
	runs   *pointRuns          // the runs behind the points the report names, when looked up at once
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
func startCounts(ctx context.Context, db runLog, f store.Filter, sem chan struct{}) <-chan countsResult {
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
func analyseSeries(x []float64, o Options, low, high float64, draw bool) (driftAnalysis, error) {
	var an driftAnalysis
	if len(x) < 2 {
		return an, fmt.Errorf("%d points: too few to chart (need at least 2)", len(x))
	}
	for i, v := range x {
		if !Chartable(v) {
			return an, fmt.Errorf("point %d is %g, outside what the charts can compute with (0, or a magnitude from %g to %g)",
				i+1, v, MinMagnitude, MaxMagnitude)
		}
	}
	an.window = drift.FirstN(min(o.Baseline, len(x)))
	if o.approved != nil {
		// Target and σ come from the approved baseline, outside the series:
		// the window only bounds where the change point is sought, so a
		// change may come at the series' first points.
		an.window = drift.FirstN(min(2, len(x)))
	}
	rules, err := RulesFor(o.Rules, o.Chart)
	if err != nil {
		return an, err
	}
	opt := o.Drift
	opt.Rules = rules
	sub, useS := 1, false
	plan := drift.Plan{Keep: o.Alarms, Assess: true}
	switch o.Chart {
	case "watch":
		set := drift.DefaultSet
		set.Rules = rules
		plan.Charts = drift.WatchPlan(set, o.Alarms).Charts
	case "imr":
		plan.Charts = []drift.Kind{drift.Individuals, drift.MovingRange}
	case "xbar-r":
		sub = o.Subgroup
		plan.Charts = []drift.Kind{drift.Xbar, drift.Range}
	case "xbar-s":
		sub, useS = o.Subgroup, true
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
		if an.charts, err = driftCharts(x, o.Chart, sub, an.window, opt, rules); err != nil {
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

// Run reads the series o selects (the shift log, or a CSV column), analyses
// each group and returns the report; with SVG/PNG it writes the charts.
func Run(ctx context.Context, o Options) (Report, error) {
	rep := Report{Chart: o.Chart, Baseline: o.Baseline, UncertaintyPF: Num(math.NaN())}
	if err := o.resolveUncertainty(ctx); err != nil {
		return rep, err
	}
	var groups []driftSeries
	var db runLog
	if o.CSVFile != "" {
		x, err := ReadSeriesCSV(o.CSVFile, o.Column, o.Keep)
		if err != nil {
			return rep, fmt.Errorf("drift: %w", err)
		}
		rep.Source = fmt.Sprintf("CSV %s, column %s", o.CSVFile, o.Column)
		groups = []driftSeries{{x: x}}
	} else {
		l, closeLog, err := openLog(ctx, &o)
		if err != nil {
			return rep, err
		}
		defer closeLog()
		db = l
		rep.Source = sourceName(o.DB)
		rep.Since, rep.Until = o.Since, o.Until
		rep.Station, rep.Fixture, rep.Lot, rep.By = o.Filter.Station, o.Filter.Fixture, o.Filter.Lot, o.By
	}
	low, high, err := o.limits(ctx, db, &rep)
	if err != nil {
		return rep, err
	}
	rep.Limits = [2]Num{Num(low), Num(high)}
	if err := useApprovedBaseline(ctx, db, &o, &rep); err != nil {
		return rep, fmt.Errorf("drift: %w", err)
	}
	if db != nil {
		ctx, cancel := context.WithCancel(ctx)
		defer cancel() // stops Counts queries nobody waits for after an error
		if groups, err = logGroups(ctx, db, o, rep.Variant); err != nil {
			return rep, err
		}
	}
	ans, err := analyseGroups(groups, o, low, high)
	if err != nil {
		return rep, fmt.Errorf("drift: %w", err)
	}
	findRuns(ctx, db, o, groups, ans)
	var drawn []chart.Group
	for i, g := range groups {
		gr, charts, err := driftGroup(ctx, db, o, g, ans[i])
		if err != nil {
			if o.By != "" {
				err = fmt.Errorf("%s %s: %w", o.By, g.key, err)
			}
			return rep, fmt.Errorf("drift: %w", err)
		}
		rep.Groups = append(rep.Groups, gr)
		if charts != nil {
			drawn = append(drawn, chartGroup(ctx, db, o, g, charts))
		}
	}
	rep.Verdict = topVerdict(o.By, rep.Groups)
	if len(drawn) > 0 {
		if err := writeCharts(ctx, db, o, groups, drawn, &rep); err != nil {
			return rep, fmt.Errorf("drift: %w", err)
		}
	}
	return rep, nil
}

// resolveUncertainty sets U: given on the command line, else the station
// file's (the same U padline run judged with: the station's stored budget,
// else its file, else the stand-in).
func (o *Options) resolveUncertainty(ctx context.Context) error {
	switch {
	case o.UncertaintyGiven:
		o.UncertaintyFrom = "--uncertainty-pf"
	case o.StationFile != "":
		st, err := session.LoadStation(o.StationFile)
		if err != nil {
			return fmt.Errorf("drift: %w", err)
		}
		if o.UncertaintyPF, o.UncertaintyFrom, err = session.Uncertainty(ctx, o.DB, st); err != nil {
			return err
		}
	}
	if o.UncertaintyFrom == "" {
		o.UncertaintyFrom = "stand-in (no station file)"
	}
	return nil
}

// limits are the capability limits: LSL/USL when given, else the variant's
// test limits with U; it fills the report's variant and where the limits
// came from.
func (o *Options) limits(ctx context.Context, db runLog, rep *Report) (low, high float64, err error) {
	low, high = o.LSL, o.USL
	if o.Variant != "" {
		v, from, err := session.VariantFor(ctx, db, o.Variant)
		switch {
		case err != nil && o.CSVFile != "":
			return low, high, fmt.Errorf("drift: %w", err)
		case err != nil:
			// Runs of a variant this program has no file for: the trip
			// series is still there, capability needs --lsl/--usl.
			rep.Variant = o.Variant
			rep.LimitsFrom = "none: " + err.Error()
		default:
			rep.Variant = v.Name
			lr, err := v.StationLimits(o.UncertaintyPF)
			if err != nil {
				return low, high, fmt.Errorf("drift: %w", err)
			}
			if math.IsNaN(low) {
				low = lr.TestLimits.Low
			}
			if math.IsNaN(high) {
				high = lr.TestLimits.High
			}
			rep.UncertaintyPF = Num(o.UncertaintyPF)
			rep.LimitsFrom = fmt.Sprintf("variant %s from %s, U %.2f pF (%s)", v.Name, from, o.UncertaintyPF, o.UncertaintyFrom)
		}
	}
	if !math.IsNaN(o.LSL) || !math.IsNaN(o.USL) {
		rep.LimitsFrom = "--lsl/--usl"
		if !math.IsNaN(o.LSL) && !math.IsNaN(o.USL) && o.LSL >= o.USL {
			return low, high, fmt.Errorf("drift: --lsl %g must be below --usl %g", o.LSL, o.USL)
		}
	}
	return low, high, nil
}

// logGroups reads the variant's trip series from the log, split by --by,
// each group with its verdict counts computing in the background. The
// counts start before the series is read when their filter is known then
// (without --last), so the two run side by side.
func logGroups(ctx context.Context, db runLog, o Options, variant string) ([]driftSeries, error) {
	o.Filter.Variant = variant
	sem := make(chan struct{}, driftCountWorkers)
	gc, _ := db.(groupCounter)
	byGroups := gc != nil && groupKey(store.Filter{}, o.By) != nil
	var (
		whole <-chan countsResult
		by    *countsBy
	)
	if o.Last == 0 && o.By == "" {
		whole = startCounts(ctx, db, o.Filter, sem)
	}
	if rs, ok := db.(runStreamer); ok && o.Last == 0 && o.Filter.Verdict == "" && streamKey(store.TripPoint{}, o.By) != nil {
		return streamGroups(ctx, rs, o, variant)
	}
	if o.Last == 0 && byGroups {
		f := o.Filter
		f.FirstInGroup = true // as driftKey sets it for every group CountsBy counts
		by = startCountsBy(ctx, gc, byCommon(f, o.By), o.By)
	}
	groups, err := driftGroups(ctx, db, o.Filter, o.By, o.AllVerdicts, o.Last)
	if err != nil {
		return nil, fmt.Errorf("drift: %w", err)
	}
	if len(groups) == 0 {
		return nil, fmt.Errorf("drift: no trip points of %s in %s%s", variant, o.DB, describeFilter(o))
	}
	if o.By == "" { // one group
		if whole == nil {
			whole = startCounts(ctx, db, groups[0].filter, sem)
		}
		groups[0].counts = whole
		return groups, nil
	}
	if byGroups {
		if common := byCommon(groups[0].filter, o.By); by == nil || by.f != common {
			by = startCountsBy(ctx, gc, common, o.By)
		}
		by.hand(groups, o.By)
		return groups, nil
	}
	for i := range groups {
		groups[i].counts = startCounts(ctx, db, groups[i].filter, sem)
	}
	return groups, nil
}

// runStreamer is a log that streams every run with its verdict and counts
// first verdicts by group on their own (the plant store): a --by series
// and its groups' run totals then come from one read of the variant's
// runs, not from the series' read and a second, grouped, count of the same
// runs alongside it (on 10,000,000 plant runs that count was most of
// drift --by station's server time).
type runStreamer interface {
	RunPoints(ctx context.Context, f store.Filter, by string) iter.Seq2[store.TripPoint, error]
	FirstCountsBy(ctx context.Context, f store.Filter, by string) (map[string]store.Counts, error)
}

// streamKey is a run's group under --by as both driftKey and CountsBy
// key it (nil: --by is not one streamGroups counts).
func streamKey(p store.TripPoint, by string) *string {
	switch by {
	case "station":
		return &p.Station
	case "fixture":
		return &p.Fixture
	case "lot":
		return &p.Lot
	case "line":
		return &p.Line
	}
	return nil
}

// streamGroups is logGroups over a runStreamer (no --last, no verdict
// filter): every run of the groups' filter is read once; each counts in
// its group's verdict totals, as CountsBy counts it, and the passing ones
// with a trip point (every one with a trip point under --all-verdicts)
// make the series, as driftGroups reads it. The first-pass counts come
// from FirstCountsBy, running alongside.
func streamGroups(ctx context.Context, rs runStreamer, o Options, variant string) ([]driftSeries, error) {
	f := o.Filter
	cf := f
	cf.FirstInGroup = true // as driftKey sets it for every group
	first := &countsBy{f: byCommon(cf, o.By), done: make(chan struct{})}
	go func() {
		defer close(first.done)
		first.m, first.err = rs.FirstCountsBy(ctx, first.f, o.By)
	}()
	runs := map[string]store.Counts{}
	var cur *store.Counts
	curKey := ""
	groups, err := seriesGroups(&f, o.By, func(add func(store.TripPoint)) error {
		for p, err := range rs.RunPoints(ctx, f, o.By) {
			if err != nil {
				return err
			}
			if k := *streamKey(p, o.By); cur == nil || k != curKey {
				if cur != nil {
					runs[curKey] = *cur
				}
				c := runs[k]
				cur, curKey = &c, k
			}
			cur.Runs++
			switch p.Verdict {
			case sequences.Pass:
				cur.Pass++
			case sequences.Fail:
				cur.Fail++
			case sequences.StationFault:
				cur.StationFault++
			}
			if !math.IsNaN(p.TripPF) && (o.AllVerdicts || p.Verdict == sequences.Pass) {
				add(p)
			}
		}
		if cur != nil {
			runs[curKey] = *cur
		}
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("drift: %w", err)
	}
	if len(groups) == 0 {
		return nil, fmt.Errorf("drift: no trip points of %s in %s%s", variant, o.DB, describeFilter(o))
	}
	for i := range groups {
		ch := make(chan countsResult, 1)
		groups[i].counts = ch
		key := groups[i].key
		go func() {
			<-first.done
			c := runs[key]
			c.FirstUnits, c.FirstPass = first.m[key].FirstUnits, first.m[key].FirstPass
			ch <- countsResult{c, first.err}
		}()
	}
	return groups, nil
}

// byCommon is a group's filter without the field --by set: what CountsBy
// counts every group under at once.
func byCommon(f store.Filter, by string) store.Filter {
	switch by {
	case "station":
		f.Station = ""
	case "fixture":
		f.Fixture = ""
	case "lot":
		f.Lot = ""
	case "line":
		f.Line = ""
	case "site":
		f.Site = 0
	}
	return f
}

// groupCounter is a log that counts every group's verdicts in one query
// (the plant store: one query per group would read the variant's runs
// once per group).
type groupCounter interface {
	CountsBy(ctx context.Context, f store.Filter, by string) (map[string]store.Counts, error)
}

// groupKey is the field of a group's filter that --by set, as CountsBy
// keys it (nil: --by has no such field).
func groupKey(f store.Filter, by string) *string {
	var k string
	switch by {
	case "station":
		k = f.Station
	case "fixture":
		k = f.Fixture
	case "lot":
		k = f.Lot
	case "line":
		k = f.Line
	case "site":
		if f.Site > 0 {
			k = strconv.Itoa(f.Site)
		}
	default:
		return nil
	}
	return &k
}

// countsBy is one CountsBy query running in the background.
type countsBy struct {
	f    store.Filter
	m    map[string]store.Counts
	err  error
	done chan struct{}
}

// startCountsBy counts the verdicts of every group under f in one
// background query.
func startCountsBy(ctx context.Context, gc groupCounter, f store.Filter, by string) *countsBy {
	c := &countsBy{f: f, done: make(chan struct{})}
	go func() {
		defer close(c.done)
		c.m, c.err = gc.CountsBy(ctx, f, by)
	}()
	return c
}

// hand gives each group its own counts once the query is done.
func (c *countsBy) hand(groups []driftSeries, by string) {
	for i := range groups {
		ch := make(chan countsResult, 1)
		groups[i].counts = ch
		key := *groupKey(groups[i].filter, by)
		go func() {
			<-c.done
			ch <- countsResult{c.m[key], c.err}
		}()
	}
}

// describeFilter states the filters for a "nothing found" message.
func describeFilter(o Options) string {
	var parts []string
	for _, p := range [][2]string{{"since", o.Since}, {"until", o.Until}, {"station", o.Filter.Station}, {"fixture", o.Filter.Fixture}, {"lot", o.Filter.Lot}} {
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
func driftGroups(ctx context.Context, db runLog, f store.Filter, by string, allVerdicts bool, last int) ([]driftSeries, error) {
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
	// With --last N only the last N are read, and the groups' yield counts
	// the runs since the first of them.
	return seriesGroups(&f, by, func(add func(store.TripPoint)) error {
		if last > 0 {
			series := db.TripSeries
			if by == "" || by == "shift" {
				series = db.TripValues
			}
			pts, err := series(ctx, sf, last)
			if err != nil {
				return err
			}
			if len(pts) > 0 && pts[0].Finished.After(f.Since) {
				f.Since = pts[0].Finished
			}
			for _, p := range pts {
				add(p)
			}
			return nil
		}
		for p, err := range db.Trips(ctx, sf, by != "" && by != "shift") {
			if err != nil {
				return err
			}
			add(p)
		}
		return nil
	})
}

// seriesGroups splits the points read calls add with into series by the
// --by key, groups in key order (shift keys sort by time); *f is the
// groups' common filter (read may narrow it before the first point).
func seriesGroups(f *store.Filter, by string, read func(add func(store.TripPoint)) error) ([]driftSeries, error) {
	var out []driftSeries
	idx := map[string]int{}
	add := func(p store.TripPoint) {
		key, i := "", 0
		if by != "" {
			var gf store.Filter
			key, gf = driftKey(p, by, *f)
			var ok bool
			if i, ok = idx[key]; !ok {
				i = len(out)
				idx[key] = i
				out = append(out, driftSeries{key: key, filter: gf})
			}
		} else if len(out) == 0 {
			out = append(out, driftSeries{filter: *f})
		}
		g := &out[i]
		g.x = append(g.x, p.TripPF)
		g.runIDs = append(g.runIDs, p.RunID)
		g.times = append(g.times, p.Finished.UnixNano())
	}
	if err := read(add); err != nil {
		return nil, err
	}
	slices.SortStableFunc(out, func(a, b driftSeries) int { return strings.Compare(a.key, b.key) })
	return out, nil
}

// driftKey is a point's group under --by, and the filter that selects the
// group's runs (for its yield).
func driftKey(p store.TripPoint, by string, f store.Filter) (string, store.Filter) {
	// A unit counts in the yield of each group it was tested in: its
	// first verdict on that station, fixture, lot or site.
	f.FirstInGroup = by != "shift"
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
	case "line":
		f.Line = p.Line
		return p.Line, f
	case "site":
		// Units tested alone form their own group.
		if p.Site == 0 {
			f.Site = -1
			return "none (units tested alone)", f
		}
		f.Site = p.Site
		return fmt.Sprintf("%02d", p.Site), f
	}
	name, start, end := ShiftOf(p.Finished.Local())
	if f.Since.IsZero() || f.Since.Before(start) {
		f.Since = start
	}
	if f.Until.IsZero() || f.Until.After(end) {
		f.Until = end
	}
	return name, f
}

// ShiftOf names the shift t falls in (early 06–14, late 14–22, night
// 22–06, dated by the day it starts) and gives its bounds, in t's zone.
func ShiftOf(t time.Time) (name string, start, end time.Time) {
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

// analyseGroups analyses every group's series, several at once (each
// group's analysis is its own; the report keeps the groups' order). The
// error is the first group's in that order, named by its key under --by.
func analyseGroups(groups []driftSeries, o Options, low, high float64) ([]driftAnalysis, error) {
	ans := make([]driftAnalysis, len(groups))
	errs := make([]error, len(groups))
	next := make(chan int)
	var wg sync.WaitGroup
	for range min(runtime.GOMAXPROCS(0), len(groups)) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range next {
				ans[i], errs[i] = analyseSeries(groups[i].x, o, low, high, o.SVG != "" || o.PNG != "")
			}
		}()
	}
	for i := range groups {
		next <- i
	}
	close(next)
	wg.Wait()
	for i, err := range errs {
		if err != nil {
			if o.By != "" {
				err = fmt.Errorf("%s %s: %w", o.By, groups[i].key, err)
			}
			return nil, err
		}
	}
	return ans, nil
}

// runFinder finds many runs by id and time in one query (the plant store,
// where one query per run costs a round trip and a plan over every month
// partition).
type runFinder interface {
	RunsAt(ctx context.Context, variant string, ids []int64, ats []time.Time) ([]store.Entry, error)
}

// pointRuns are the runs behind the points a group's report names (its
// baseline's ends, the change and the signal, the alarms listed), found
// for every group at once by findRuns.
type pointRuns struct {
	known  map[int]store.Entry // by the point's index in the series
	record bool                // note the points asked for instead of looking them up
	asked  []int
}

// runOf is the run behind point i of g: found beforehand (findRuns), else
// looked up by its id and time; the zero Entry when it cannot be found.
func (g driftSeries) runOf(ctx context.Context, db runLog, i int) store.Entry {
	if r := g.runs; r != nil {
		if e, ok := r.known[i]; ok {
			return e
		}
		if r.record {
			r.asked = append(r.asked, i)
			return store.Entry{}
		}
	}
	return runAt(ctx, db, g.filter.Variant, g.runIDs[i], time.Unix(0, g.times[i]))
}

// findRuns finds, in one query, the runs every group's report will name:
// it assembles each report once noting the points asked for (nameRuns,
// the same code that names them afterwards), then looks them all up. On
// an error each point is looked up on its own later, as without findRuns.
func findRuns(ctx context.Context, db runLog, o Options, groups []driftSeries, ans []driftAnalysis) {
	rf, ok := db.(runFinder)
	if !ok {
		return
	}
	var (
		ids   []int64
		ats   []time.Time
		owner [][2]int // group, point
	)
	for gi := range groups {
		g := &groups[gi]
		if len(g.runIDs) == 0 {
			continue
		}
		g.runs = &pointRuns{known: map[int]store.Entry{}, record: true}
		var scratch GroupReport
		nameRuns(ctx, db, o, *g, ans[gi], &scratch)
		g.runs.record = false
		for _, i := range g.runs.asked {
			if _, dup := g.runs.known[i]; dup {
				continue
			}
			g.runs.known[i] = store.Entry{}
			ids, ats, owner = append(ids, g.runIDs[i]), append(ats, time.Unix(0, g.times[i])), append(owner, [2]int{gi, i})
		}
		clear(g.runs.known)
	}
	if len(ids) == 0 {
		return
	}
	es, err := rf.RunsAt(ctx, groups[0].filter.Variant, ids, ats)
	if err != nil {
		return
	}
	for k, e := range es {
		groups[owner[k][0]].runs.known[owner[k][1]] = e
	}
}

// driftGroup assembles one group's report from its analysis. With charts
// asked for, it returns the group's charts with every point, for drawing.
func driftGroup(ctx context.Context, db runLog, o Options, g driftSeries, an driftAnalysis) (GroupReport, []drift.Chart, error) {
	gr := GroupReport{Key: g.key, Points: len(g.x)}
	nameRuns(ctx, db, o, g, an, &gr)
	if an.cap != nil {
		c := an.cap
		gr.Capability = &Capability{N: c.N, Low: Num(c.Low), High: Num(c.High), Mean: Num(c.Mean),
			SigmaWithin: Num(c.SigmaWithin), SigmaOverall: Num(c.SigmaOverall), Method: c.Method,
			Cp: Num(c.Cp), Cpk: Num(c.Cpk), Pp: Num(c.Pp), Ppk: Num(c.Ppk)}
	} else {
		gr.CapabilityNote = an.capErr.Error()
	}
	if err := groupYield(&gr, g); err != nil {
		return gr, nil, err
	}
	return gr, an.charts, nil
}

// nameRuns fills the parts of a group's report that name runs: the
// baseline, the charts' summaries, the verdict and the alarms listed.
func nameRuns(ctx context.Context, db runLog, o Options, g driftSeries, an driftAnalysis, gr *GroupReport) {
	if len(g.times) > 0 {
		gr.First, gr.Last = tptr(g.times[0]), tptr(g.times[len(g.times)-1])
	}
	w := an.window
	if len(g.times) > 0 {
		w.From, w.To = time.Unix(0, g.times[w.Start]), time.Unix(0, g.times[w.End-1])
	}
	gr.Baseline = Window{FirstUnit: w.Start + 1, LastUnit: w.End, Points: w.Len(), Text: w.String()}
	if len(g.times) > 0 {
		gr.Baseline.From, gr.Baseline.To = &w.From, &w.To
	}
	describeBaseline(ctx, db, o, g, &gr.Baseline)
	for _, c := range an.sum.Charts {
		cs := chartSummary(c)
		if o.approved != nil {
			cs.Method = fmt.Sprintf("approved baseline %q", o.approved.Name)
		}
		gr.Charts = append(gr.Charts, cs)
	}
	gr.AlarmCount = an.sum.Alarms
	gr.Verdict = driftVerdict(ctx, db, o, g, an)
	gr.Alarms = groupAlarms(ctx, db, g, an.sum.First, o.Alarms)
}

// groupAlarms lists the earliest limit alarms (0 = all) with each one's
// run, time and serial when the series came from the shift log.
func groupAlarms(ctx context.Context, db runLog, g driftSeries, alarms []drift.Alarm, limit int) []Alarm {
	shown := alarms
	if limit > 0 && len(shown) > limit {
		shown = shown[:limit] // the earliest: when the drift began
	}
	var out []Alarm
	for _, al := range shown {
		aj := Alarm{Seq: al.Seq, Chart: string(al.Chart), Rule: string(al.Rule), Description: al.Description(),
			Unit: al.Unit + 1, Point: al.Index + 1, Side: al.Side, Note: al.Note}
		if al.Onset >= 0 && al.Chart == drift.CUSUM {
			aj.OnsetUnit = al.Onset + 1
			if al.Onset < len(g.runIDs) && db != nil {
				at := time.Unix(0, g.times[al.Onset])
				aj.Note = OnsetNote(al, PointName(g.runOf(ctx, db, al.Onset).Serial, at, false))
			}
		}
		if al.Unit < len(g.runIDs) {
			aj.RunID = g.runIDs[al.Unit]
			aj.Time = tptr(g.times[al.Unit])
			if db != nil {
				aj.Serial = g.runOf(ctx, db, al.Unit).Serial
			}
		}
		out = append(out, aj)
	}
	return out
}

// groupYield waits for the group's verdict counts and adds the first-pass
// yield with its exact Clopper–Pearson 95 % interval.
func groupYield(gr *GroupReport, g driftSeries) error {
	if g.counts == nil {
		return nil
	}
	res := <-g.counts
	cnt, err := res.c, res.err
	if err != nil {
		return err
	}
	gr.Runs = cnt.Runs
	if cnt.FirstUnits > 0 {
		y, err := drift.FirstPassYield(int(cnt.FirstPass), int(cnt.FirstUnits), 0.95)
		if err != nil {
			return err
		}
		gr.Yield = &Yield{Pass: y.Pass, Total: y.Total, Rate: Num(y.Rate), Low: Num(y.Low), High: Num(y.High), Confidence: y.Confidence}
	}
	return nil
}

func tptr(ns int64) *time.Time {
	t := time.Unix(0, ns)
	return &t
}
