package drift

import (
	"fmt"
	"math"
	"sort"
)

// Kind names a chart.
type Kind string

// Chart kinds.
const (
	Individuals Kind = "individuals"  // individual values
	MovingRange Kind = "moving-range" // |x_i − x_{i−1}|
	Xbar        Kind = "xbar"         // subgroup means
	Range       Kind = "range"        // subgroup ranges
	StdDev      Kind = "stdev"        // subgroup standard deviations
	EWMA        Kind = "ewma"         // exponentially weighted moving average
	CUSUM       Kind = "cusum"        // tabular CUSUM, C⁺ and −C⁻
)

// Title is the chart's name for people.
func (k Kind) Title() string {
	switch k {
	case Individuals:
		return "Individuals"
	case MovingRange:
		return "Moving range"
	case Xbar:
		return "Subgroup mean (X̄)"
	case Range:
		return "Subgroup range (R)"
	case StdDev:
		return "Subgroup standard deviation (s)"
	case EWMA:
		return "EWMA"
	case CUSUM:
		return "Tabular CUSUM"
	}
	return string(k)
}

// Options tune the charts. The zero value asks for the textbook defaults
// and for every parameter to be estimated from the baseline window.
type Options struct {
	// Target is the process centre to use when FixTarget is set; otherwise
	// the centre is the baseline mean.
	Target    float64
	FixTarget bool
	// Sigma, when > 0, is the process σ per observation; otherwise it is
	// estimated from the baseline (MR̄/d2, R̄/d2 or s̄/c4).
	Sigma float64
	// Width is the Shewhart limit half-width in σ; 0 means 3. The run-rule
	// zones scale with it (Width/3, 2·Width/3).
	Width float64
	// Rules are the run rules on the location chart; nil means
	// WesternElectric.
	Rules []Rule
	// Lambda and L are the EWMA weight and limit width; 0 means
	// DefaultLambda and DefaultL.
	Lambda, L float64
	// K and H are the CUSUM reference value and decision interval in σ;
	// 0 means DefaultK and DefaultH.
	K, H float64
	// HeadStart is the CUSUM fast initial response: both sums start at
	// HeadStart·σ (H/2 is the usual choice); 0 means none.
	HeadStart float64
}

// Defaults for the small-shift charts; see the package tests and
// SimulateRunLength for the run lengths they give.
const (
	DefaultLambda = 0.2
	DefaultL      = 2.86
	DefaultK      = 0.5
	DefaultH      = 5
)

func (o Options) width() float64 {
	if o.Width > 0 {
		return o.Width
	}
	return 3
}

func (o Options) rules() []Rule {
	if o.Rules == nil {
		return WesternElectric
	}
	return o.Rules
}

// Chart is one plotted statistic with its centre line, limits and alarms.
// Point i of a chart covers series indices [i·Size, (i+1)·Size).
type Chart struct {
	Kind Kind
	Size int // observations per point (subgroup size; 1 for individuals, EWMA, CUSUM)

	Stat  []float64 // plotted statistic, one per point (NaN where undefined)
	Stat2 []float64 // CUSUM only: −C⁻ per point; nil otherwise

	Center       float64   // centre line
	Upper, Lower []float64 // limits per point (EWMA limits vary with time)
	Zone         float64   // σ of the plotted statistic used by the zone rules; 0 if none

	Target float64 // process centre the chart was built on
	Sigma  float64 // process σ per observation
	Method string  // how Target and Sigma were found, e.g. "mean, MR̄/d2 over units 1–50 (50 points)"

	Window Window  // baseline in series indices
	Base   Window  // baseline in chart points (what the renderer shades)
	Alarms []Alarm // in Seq order
}

// Shewhart is a location chart with its spread companion: individuals with
// moving range, X̄ with R, or X̄ with s. Alarms holds the alarms of both,
// numbered together in order of Unit.
type Shewhart struct {
	Location, Spread Chart
	Alarms           []Alarm
}

// estimate is a baseline centre and σ with how they were found.
type estimate struct {
	mean, sigma float64
	method      string
}

func finite(x []float64) error {
	for i, v := range x {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("value %d is %v: %w", i+1, v, ErrParam)
		}
	}
	return nil
}

// estimateIndividuals: mean and MR̄/d2(2) over the window.
func estimateIndividuals(x []float64, w Window, o Options) (estimate, error) {
	if err := finite(x); err != nil {
		return estimate{}, err
	}
	if err := w.check(len(x), 2); err != nil {
		return estimate{}, err
	}
	var sum, mr float64
	for j := w.Start; j < w.End; j++ {
		sum += x[j]
		if j > w.Start {
			mr += math.Abs(x[j] - x[j-1])
		}
	}
	e := estimate{mean: sum / float64(w.Len()), sigma: mr / float64(w.Len()-1) / table[0].D2}
	return e.apply(o, w, "MR̄/d2")
}

func (e estimate) apply(o Options, w Window, how string) (estimate, error) {
	centre, spread := "mean", how
	if o.FixTarget {
		e.mean, centre = o.Target, "target given"
	}
	if o.Sigma > 0 {
		e.sigma, spread = o.Sigma, "σ given"
	}
	e.method = fmt.Sprintf("%s, %s over %s", centre, spread, w)
	if !(e.sigma > 0) {
		return e, fmt.Errorf("baseline %s has no spread: %w", w, ErrShortBaseline)
	}
	return e, nil
}

func fill(n int, v float64) []float64 {
	s := make([]float64, n)
	for i := range s {
		s[i] = v
	}
	return s
}

// location builds a Shewhart location chart and runs the rules on it.
func location(kind Kind, stat []float64, size int, e estimate, o Options, w, base Window) Chart {
	zone := e.sigma / math.Sqrt(float64(size))
	a := o.width()
	c := Chart{
		Kind: kind, Size: size, Stat: stat, Center: e.mean,
		Upper: fill(len(stat), e.mean+a*zone), Lower: fill(len(stat), e.mean-a*zone),
		Zone: zone, Target: e.mean, Sigma: e.sigma, Method: e.method, Window: w, Base: base,
	}
	eng := newRuleEngine(o.rules(), a)
	for i, v := range stat {
		for _, f := range eng.add((v - e.mean) / zone) {
			c.Alarms = append(c.Alarms, Alarm{Chart: kind, Rule: f.rule, Index: i, Unit: (i+1)*size - 1, Points: f.points, Side: f.side, Onset: -1})
		}
	}
	return c
}

// spread builds a dispersion chart with centre m·σ and limits
// (m ± width·sd)·σ, the lower floored at 0; at width 3 the published
// factors (D3, D4 or B3, B4) are used so the limits match the tables.
func spread(kind Kind, stat []float64, size int, centre, upper, lower float64, e estimate, w, base Window) Chart {
	c := Chart{
		Kind: kind, Size: size, Stat: stat, Center: centre,
		Upper: fill(len(stat), upper), Lower: fill(len(stat), lower),
		Target: e.mean, Sigma: e.sigma, Method: e.method, Window: w, Base: base,
	}
	for i, v := range stat {
		if v > upper || (lower > 0 && v < lower) {
			side := 1
			if v < lower {
				side = -1
			}
			c.Alarms = append(c.Alarms, Alarm{Chart: kind, Rule: Limit, Index: i, Unit: (i+1)*size - 1, Points: []int{i}, Side: side, Onset: -1})
		}
	}
	return c
}

func rangeLimits(k Constants, sigma, a float64) (centre, upper, lower float64) {
	centre = k.D2 * sigma
	if a == 3 {
		return centre, k.RangeHigh * centre, k.RangeLow * centre
	}
	return centre, (k.D2 + a*k.D3) * sigma, math.Max(0, (k.D2-a*k.D3)*sigma)
}

// IndividualsChart is the individuals/moving-range pair: centre and σ =
// MR̄/d2(2) from the baseline window unless given in o; the run rules
// o.Rules apply to the individuals; the moving-range chart reports points
// beyond its limits only. MR point 0 is NaN.
func IndividualsChart(x []float64, w Window, o Options) (Shewhart, error) {
	e, err := estimateIndividuals(x, w, o)
	if err != nil {
		return Shewhart{}, fmt.Errorf("individuals chart: %w", err)
	}
	loc := location(Individuals, append([]float64(nil), x...), 1, e, o, w, w)
	mr := make([]float64, len(x))
	mr[0] = math.NaN()
	for i := 1; i < len(x); i++ {
		mr[i] = math.Abs(x[i] - x[i-1])
	}
	c, u, l := rangeLimits(table[0], e.sigma, o.width())
	sp := spread(MovingRange, mr, 1, c, u, l, e, w, w)
	return pair(loc, sp), nil
}

func pair(loc, sp Chart) Shewhart {
	s := Shewhart{Location: loc, Spread: sp}
	s.Alarms = Number(&s.Location, &s.Spread)
	return s
}

// subgroupBase checks x for subgroups of n and maps the window onto the
// whole subgroups inside it (a trailing partial subgroup is dropped).
func subgroupBase(x []float64, n int, w Window) (Window, error) {
	if n < MinSubgroup || n > MaxSubgroup {
		return Window{}, fmt.Errorf("subgroup size %d: %w", n, ErrSubgroupSize)
	}
	if err := finite(x); err != nil {
		return Window{}, err
	}
	if err := w.check(len(x), 2*n); err != nil {
		return Window{}, err
	}
	base := Window{Start: (w.Start + n - 1) / n, End: w.End / n, From: w.From, To: w.To}
	if base.Len() < 2 {
		return Window{}, fmt.Errorf("baseline %s holds %d whole subgroups of %d: %w", w, base.Len(), n, ErrShortBaseline)
	}
	return base, nil
}

func meanOf(v []float64) float64 {
	var s float64
	for _, x := range v {
		s += x
	}
	return s / float64(len(v))
}

func sdOf(v []float64) float64 {
	m := meanOf(v)
	var ss float64
	for _, x := range v {
		ss += (x - m) * (x - m)
	}
	return math.Sqrt(ss / float64(len(v)-1))
}

func rangeOf(v []float64) float64 {
	lo, hi := v[0], v[0]
	for _, x := range v {
		lo, hi = math.Min(lo, x), math.Max(hi, x)
	}
	return hi - lo
}

// dispersion is a subgroup's range (kind Range) or standard deviation.
func dispersion(s []float64, kind Kind) float64 {
	if kind == Range {
		return rangeOf(s)
	}
	return sdOf(s)
}

// estimateXbar: the grand mean of the subgroup means and σ = R̄/d2 or
// s̄/c4 over the whole subgroups of n inside the window, summed in
// subgroup order. It returns the window in subgroups too.
func estimateXbar(x []float64, n int, w Window, o Options, kind Kind) (estimate, Window, error) {
	base, err := subgroupBase(x, n, w)
	if err != nil {
		return estimate{}, Window{}, err
	}
	k := table[n-MinSubgroup]
	var sumMean, sumDisp float64
	for i := base.Start; i < base.End; i++ {
		s := x[i*n : (i+1)*n]
		sumMean += meanOf(s)
		sumDisp += dispersion(s, kind)
	}
	e := estimate{mean: sumMean / float64(base.Len())}
	bar := sumDisp / float64(base.Len())
	how := "R̄/d2"
	if kind == Range {
		e.sigma = bar / k.D2
	} else {
		e.sigma, how = bar/k.C4, "s̄/c4"
	}
	e, err = e.apply(o, w, how)
	return e, base, err
}

// xbarSpreadLimits are the centre and limits of the R or s chart that goes
// with an X̄ chart of subgroups of k.N.
func xbarSpreadLimits(k Constants, sigma, a float64, kind Kind) (c, u, l float64) {
	if kind == Range {
		return rangeLimits(k, sigma, a)
	}
	c = k.C4 * sigma
	if a == 3 {
		return c, k.B4 * c, k.B3 * c
	}
	sd := math.Sqrt(1-k.C4*k.C4) * sigma
	return c, c + a*sd, math.Max(0, c-a*sd)
}

// XbarRChart is the X̄-R pair for consecutive subgroups of n (2…10):
// σ = R̄/d2 over the whole subgroups inside the baseline window.
func XbarRChart(x []float64, n int, w Window, o Options) (Shewhart, error) {
	return xbarChart(x, n, w, o, Range)
}

// XbarSChart is the X̄-s pair for consecutive subgroups of n (2…10):
// σ = s̄/c4 over the whole subgroups inside the baseline window.
func XbarSChart(x []float64, n int, w Window, o Options) (Shewhart, error) {
	return xbarChart(x, n, w, o, StdDev)
}

func xbarChart(x []float64, n int, w Window, o Options, kind Kind) (Shewhart, error) {
	e, base, err := estimateXbar(x, n, w, o, kind)
	if err != nil {
		return Shewhart{}, fmt.Errorf("x̄-%s chart: %w", kind, err)
	}
	means := make([]float64, len(x)/n)
	disp := make([]float64, len(x)/n)
	for i := range means {
		s := x[i*n : (i+1)*n]
		means[i] = meanOf(s)
		disp[i] = dispersion(s, kind)
	}
	loc := location(Xbar, means, n, e, o, w, base)
	c, u, l := xbarSpreadLimits(table[n-MinSubgroup], e.sigma, o.width(), kind)
	return pair(loc, spread(kind, disp, n, c, u, l, e, w, base)), nil
}

// Number merges the alarms of the charts in order of Unit (ties: chart
// order given, then rule order as raised), gives them Seq = 1, 2, … and
// writes the numbers back into each chart. It returns the merged list.
func Number(charts ...*Chart) []Alarm {
	type ref struct{ c, i int }
	var refs []ref
	for ci, c := range charts {
		for i := range c.Alarms {
			refs = append(refs, ref{ci, i})
		}
	}
	sort.SliceStable(refs, func(a, b int) bool {
		return charts[refs[a].c].Alarms[refs[a].i].Unit < charts[refs[b].c].Alarms[refs[b].i].Unit
	})
	out := make([]Alarm, len(refs))
	for n, r := range refs {
		charts[r.c].Alarms[r.i].Seq = n + 1
		out[n] = charts[r.c].Alarms[r.i]
	}
	for _, c := range charts {
		sort.SliceStable(c.Alarms, func(a, b int) bool { return c.Alarms[a].Seq < c.Alarms[b].Seq })
	}
	return out
}
