package drift

import (
	"fmt"
	"math"
)

// Plan is the chart or chart set Summarize runs over a series. Charts are
// run, and their alarms numbered, in the order given, which must be one of:
//
//   - any of Individuals, EWMA, CUSUM, in that order (the set WatchSeries
//     runs; the individuals chart uses Options.Rules);
//   - Individuals, MovingRange (IndividualsChart);
//   - Xbar, Range or Xbar, StdDev with Subgroup 2…10 (XbarRChart,
//     XbarSChart).
type Plan struct {
	Charts   []Kind
	Subgroup int // observations per subgroup for Xbar; ignored otherwise
	// Keep is how many of the most recent alarms Summary.Last holds, and
	// how many of the earliest Summary.First holds; 0 keeps them all.
	Keep int
	// Assess asks for Summary.Finding: the series assessed against the
	// first chart's target and σ, as Assess would over every alarm.
	Assess bool
}

// WatchPlan is the Plan of WatchSeries for set: the individuals chart when
// set.Rules is not empty (run with Options.Rules = set.Rules), then EWMA and
// CUSUM as set asks.
func WatchPlan(set Set, keep int) Plan {
	p := Plan{Keep: keep}
	if len(set.Rules) > 0 {
		p.Charts = append(p.Charts, Individuals)
	}
	if set.EWMA {
		p.Charts = append(p.Charts, EWMA)
	}
	if set.CUSUM {
		p.Charts = append(p.Charts, CUSUM)
	}
	return p
}

// ChartSummary is a chart without its points: what a report prints.
type ChartSummary struct {
	Kind   Kind
	Size   int // observations per point
	Points int // chart points
	// Center is the centre line; Lower and Upper are the limits at the last
	// point (EWMA limits widen towards their steady value; the others are
	// constant).
	Center, Lower, Upper float64
	Zone                 float64 // σ of the plotted statistic for the zone rules; 0 if none
	Target, Sigma        float64 // process centre and σ per observation the chart was built on
	Method               string  // how Target and Sigma were found
	Window, Base         Window  // baseline in series indices and in chart points
	Alarms               int     // alarms this chart raised
}

// Summary is what Summarize finds: each chart without its points, the
// number of alarms, and the most recent of them.
type Summary struct {
	Charts []ChartSummary
	// Alarms counts the alarms of every chart.
	Alarms int
	// First holds the earliest alarms (Plan.Keep of them, or all), in
	// Seq order: where a drift began.
	First []Alarm
	// Finding is Assess over every alarm (Plan.Assess).
	Finding Finding
	// Last holds the most recent alarms (Plan.Keep of them, or all), oldest
	// first. Seq numbers every alarm of the series 1, 2, … in order of
	// Unit, charts in Plan order, exactly as Number numbers the charts
	// that WatchSeries, IndividualsChart, XbarRChart, XbarSChart, EWMAChart
	// and CUSUMChart return.
	Last []Alarm
}

// Summary drops the chart's points: the chart as a report prints it.
func (c Chart) Summary() ChartSummary {
	s := ChartSummary{Kind: c.Kind, Size: c.Size, Points: len(c.Stat), Center: c.Center,
		Lower: math.NaN(), Upper: math.NaN(), Zone: c.Zone, Target: c.Target, Sigma: c.Sigma,
		Method: c.Method, Window: c.Window, Base: c.Base, Alarms: len(c.Alarms)}
	if n := len(c.Lower); n > 0 {
		s.Lower = c.Lower[n-1]
	}
	if n := len(c.Upper); n > 0 {
		s.Upper = c.Upper[n-1]
	}
	return s
}

// Summarize runs the charts of p over x with limits from the baseline
// window w (phase I) applied to the whole series (phase II), as the chart
// functions do, and returns the same centre lines, limits and alarms, but
// in one pass that keeps no per-point arrays: its memory is the run rules'
// short window and the alarms it keeps (Plan.Keep), whatever the length of
// x. Use it for long series; draw charts from the chart functions.
func Summarize(x []float64, w Window, o Options, p Plan) (Summary, error) {
	if len(p.Charts) == 0 {
		return Summary{}, fmt.Errorf("summarize: no charts: %w", ErrParam)
	}
	if p.Keep < 0 {
		return Summary{}, fmt.Errorf("summarize: keep %d alarms: %w", p.Keep, ErrParam)
	}
	if p.Charts[0] == Xbar {
		return summarizeXbar(x, w, o, p)
	}
	return summarizeIndividuals(x, w, o, p)
}

// alarmLog numbers alarms as they come and keeps the most recent keep of
// them in a ring (all when keep is 0).
type alarmLog struct {
	keep  int
	n     int
	first []Alarm
	ring  []Alarm
	next  int // ring slot of the next alarm once the ring is full
	count []int
	tally *tally // nil unless Plan.Assess
}

func (l *alarmLog) add(chart int, a Alarm) {
	l.n++
	a.Seq = l.n
	l.count[chart]++
	if l.tally != nil {
		l.tally.add(a)
	}
	if l.keep > 0 && len(l.first) < l.keep {
		l.first = append(l.first, a)
	}
	switch {
	case l.keep == 0 || len(l.ring) < l.keep:
		l.ring = append(l.ring, a)
	default:
		l.ring[l.next] = a
		l.next = (l.next + 1) % l.keep
	}
}

func (l *alarmLog) last() []Alarm {
	out := make([]Alarm, 0, len(l.ring))
	out = append(out, l.ring[l.next:]...)
	return append(out, l.ring[:l.next]...)
}

func (l *alarmLog) summary(charts []ChartSummary) Summary {
	for i := range charts {
		charts[i].Alarms = l.count[i]
	}
	s := Summary{Charts: charts, Alarms: l.n, First: l.first, Last: l.last()}
	if l.keep == 0 {
		s.First = s.Last // every alarm, oldest first, in both
	}
	if l.tally != nil {
		s.Finding = l.tally.finding()
	}
	return s
}

// checkIndividualsPlan checks that kinds is an ordered subset of
// {Individuals, MovingRange, EWMA, CUSUM} that is either the watch set or
// the individuals/moving-range pair.
func checkIndividualsPlan(kinds []Kind) error {
	order := map[Kind]int{Individuals: 0, MovingRange: 1, EWMA: 2, CUSUM: 3}
	prev := -1
	mr := false
	for _, k := range kinds {
		o, ok := order[k]
		if !ok || o <= prev {
			return fmt.Errorf("summarize: chart %s out of place in %v: %w", k, kinds, ErrParam)
		}
		prev = o
		mr = mr || k == MovingRange
	}
	if mr && (len(kinds) != 2 || kinds[0] != Individuals) {
		return fmt.Errorf("summarize: the moving range goes with the individuals chart alone, not %v: %w", kinds, ErrParam)
	}
	return nil
}

func summarizeIndividuals(x []float64, w Window, o Options, p Plan) (Summary, error) {
	if err := checkIndividualsPlan(p.Charts); err != nil {
		return Summary{}, err
	}
	e, err := estimateIndividuals(x, w, o)
	if err != nil {
		return Summary{}, fmt.Errorf("%s chart: %w", chartName(p.Charts[0]), err)
	}
	log := alarmLog{keep: p.Keep, count: make([]int, len(p.Charts))}
	if p.Assess {
		log.tally = newTally(x, e.mean, e.sigma, w)
	}
	charts := make([]ChartSummary, len(p.Charts))
	var (
		eng            *ruleEngine
		ew             *ewmaState
		cu             *cusumState
		iInd, iMR      = -1, -1
		iEWMA, iCUSUM  = -1, -1
		mrC, mrU, mrL  float64
		a              = o.width()
		ewLo, ewHi, hh float64
	)
	for i, k := range p.Charts {
		c := ChartSummary{Kind: k, Size: 1, Points: len(x), Target: e.mean, Sigma: e.sigma,
			Method: e.method, Window: w, Base: w}
		switch k {
		case Individuals:
			iInd = i
			eng = newRuleEngine(o.rules(), a)
			c.Center, c.Zone = e.mean, e.sigma
			c.Upper, c.Lower = e.mean+a*e.sigma, e.mean-a*e.sigma
		case MovingRange:
			iMR = i
			mrC, mrU, mrL = rangeLimits(table[0], e.sigma, a)
			c.Center, c.Upper, c.Lower = mrC, mrU, mrL
		case EWMA:
			iEWMA = i
			if ew, err = newEWMA(e.mean, e.sigma, o); err != nil {
				return Summary{}, fmt.Errorf("ewma chart: %w", err)
			}
			c.Center = e.mean
		case CUSUM:
			iCUSUM = i
			if cu, err = newCUSUM(e.mean, e.sigma, o); err != nil {
				return Summary{}, fmt.Errorf("cusum chart: %w", err)
			}
			hh = cu.h * e.sigma
			c.Upper, c.Lower = hh, -hh
		}
		charts[i] = c
	}
	for i, v := range x {
		if eng != nil {
			for _, f := range eng.add((v - e.mean) / e.sigma) {
				log.add(iInd, Alarm{Chart: Individuals, Rule: f.rule, Index: i, Unit: i, Points: f.points, Side: f.side, Onset: -1})
			}
		}
		if iMR >= 0 && i > 0 {
			if mr := math.Abs(v - x[i-1]); mr > mrU || (mrL > 0 && mr < mrL) {
				side := 1
				if mr < mrL {
					side = -1
				}
				log.add(iMR, Alarm{Chart: MovingRange, Rule: Limit, Index: i, Unit: i, Points: []int{i}, Side: side, Onset: -1})
			}
		}
		if ew != nil {
			var side int
			_, ewLo, ewHi, side = ew.add(v)
			if side != 0 {
				log.add(iEWMA, Alarm{Chart: EWMA, Rule: EWMASignal, Index: i, Unit: i, Points: []int{i}, Side: side, Onset: -1})
			}
		}
		if cu != nil {
			cp, cm, up, down := cu.add(v)
			if up {
				log.add(iCUSUM, cusumAlarm(i, cu.np, 1, e.mean+cu.k*e.sigma+cp/float64(cu.np)))
			}
			if down {
				log.add(iCUSUM, cusumAlarm(i, cu.nm, -1, e.mean-cu.k*e.sigma-cm/float64(cu.nm)))
			}
		}
	}
	if iEWMA >= 0 {
		charts[iEWMA].Lower, charts[iEWMA].Upper = ewLo, ewHi
	}
	return log.summary(charts), nil
}

func chartName(k Kind) string {
	switch k {
	case Individuals, MovingRange:
		return "individuals"
	case EWMA:
		return "ewma"
	case CUSUM:
		return "cusum"
	}
	return string(k)
}

func summarizeXbar(x []float64, w Window, o Options, p Plan) (Summary, error) {
	if len(p.Charts) != 2 || (p.Charts[1] != Range && p.Charts[1] != StdDev) {
		return Summary{}, fmt.Errorf("summarize: the x̄ chart goes with range or stdev, not %v: %w", p.Charts, ErrParam)
	}
	kind, n := p.Charts[1], p.Subgroup
	e, base, err := estimateXbar(x, n, w, o, kind)
	if err != nil {
		return Summary{}, fmt.Errorf("x̄-%s chart: %w", kind, err)
	}
	sc, su, sl := xbarSpreadLimits(table[n-MinSubgroup], e.sigma, o.width(), kind)
	a := o.width()
	zone := e.sigma / math.Sqrt(float64(n))
	points := len(x) / n
	charts := []ChartSummary{
		{Kind: Xbar, Size: n, Points: points, Center: e.mean, Upper: e.mean + a*zone, Lower: e.mean - a*zone,
			Zone: zone, Target: e.mean, Sigma: e.sigma, Method: e.method, Window: w, Base: base},
		{Kind: kind, Size: n, Points: points, Center: sc, Upper: su, Lower: sl,
			Target: e.mean, Sigma: e.sigma, Method: e.method, Window: w, Base: base},
	}
	log := alarmLog{keep: p.Keep, count: make([]int, 2)}
	if p.Assess {
		log.tally = newTally(x, e.mean, e.sigma, w)
	}
	eng := newRuleEngine(o.rules(), a)
	for i := range points {
		s := x[i*n : (i+1)*n]
		unit := (i+1)*n - 1
		for _, f := range eng.add((meanOf(s) - e.mean) / zone) {
			log.add(0, Alarm{Chart: Xbar, Rule: f.rule, Index: i, Unit: unit, Points: f.points, Side: f.side, Onset: -1})
		}
		d := dispersion(s, kind)
		if d > su || (sl > 0 && d < sl) {
			side := 1
			if d < sl {
				side = -1
			}
			log.add(1, Alarm{Chart: kind, Rule: Limit, Index: i, Unit: unit, Points: []int{i}, Side: side, Onset: -1})
		}
	}
	return log.summary(charts), nil
}
