package drift

import "fmt"

// Set is a chart set for WatchSeries, Monitor and SimulateRunLength.
type Set struct {
	Rules []Rule // run rules on the individuals chart; empty means no individuals chart
	EWMA  bool   // add the EWMA chart (Options.Lambda, Options.L)
	CUSUM bool   // add the tabular CUSUM (Options.K, Options.H, Options.HeadStart)
}

// DefaultSet is the recommended watch on trip points: the individuals
// chart with the 3σ limit test alone (catches large jumps at once), plus
// the tabular CUSUM at k = 0.5, h = 5 (Options.K, H at their defaults;
// catches small steps). Measured with SimulateRunLength, 20000 runs, seed 1,
// known parameters: in-control ARL 223 (median 154); a 1σ step is flagged
// after a mean of 9.9, median 9 points from the step (zero-state), median 8
// after 100 in-control points; with limits estimated from a 50-point
// baseline the in-control ARL is 457 (median 110) and the 1σ median 9.
// The full Western Electric set is not the default: on its own its
// in-control ARL is about 92, below the 150-point target.
var DefaultSet = Set{Rules: LimitsOnly, CUSUM: true}

// Watch is the result of WatchSeries: the charts run and their alarms
// merged in order of Unit, numbered 1, 2, … to match the rendered charts.
type Watch struct {
	Charts []Chart
	Alarms []Alarm
	Window Window
}

// First is the first alarm at or after unit from, and whether there is one.
func (w Watch) First(from int) (Alarm, bool) {
	for _, a := range w.Alarms {
		if a.Unit >= from {
			return a, true
		}
	}
	return Alarm{}, false
}

// WatchSeries runs the chart set over x with limits from the baseline
// window (phase I) applied to the whole series (phase II). set.Rules
// replaces o.Rules for the individuals chart.
func WatchSeries(x []float64, w Window, o Options, set Set) (Watch, error) {
	out := Watch{Window: w}
	if len(set.Rules) > 0 {
		oo := o
		oo.Rules = set.Rules
		s, err := IndividualsChart(x, w, oo)
		if err != nil {
			return Watch{}, fmt.Errorf("watch: %w", err)
		}
		out.Charts = append(out.Charts, s.Location)
	}
	if set.EWMA {
		c, err := EWMAChart(x, w, o)
		if err != nil {
			return Watch{}, fmt.Errorf("watch: %w", err)
		}
		out.Charts = append(out.Charts, c)
	}
	if set.CUSUM {
		c, err := CUSUMChart(x, w, o)
		if err != nil {
			return Watch{}, fmt.Errorf("watch: %w", err)
		}
		out.Charts = append(out.Charts, c)
	}
	if len(out.Charts) == 0 {
		return Watch{}, fmt.Errorf("watch: empty chart set: %w", ErrParam)
	}
	ptrs := make([]*Chart, len(out.Charts))
	for i := range out.Charts {
		ptrs[i] = &out.Charts[i]
	}
	out.Alarms = Number(ptrs...)
	return out, nil
}

// Monitor applies a chart set one value at a time with a known target and
// σ (from a phase I baseline), for watching a line as units come off it.
// Alarms have Seq 0; Index and Unit count the values added, from 0.
type Monitor struct {
	target, sigma, width float64
	eng                  *ruleEngine
	ew                   *ewmaState
	cu                   *cusumState
	n                    int
}

// NewMonitor builds a monitor for the chart set.
func NewMonitor(target, sigma float64, o Options, set Set) (*Monitor, error) {
	if !(sigma > 0) {
		return nil, fmt.Errorf("monitor σ = %g: %w", sigma, ErrParam)
	}
	m := &Monitor{target: target, sigma: sigma, width: o.width()}
	if len(set.Rules) > 0 {
		m.eng = newRuleEngine(set.Rules, m.width)
	}
	var err error
	if set.EWMA {
		if m.ew, err = newEWMA(target, sigma, o); err != nil {
			return nil, fmt.Errorf("monitor: %w", err)
		}
	}
	if set.CUSUM {
		if m.cu, err = newCUSUM(target, sigma, o); err != nil {
			return nil, fmt.Errorf("monitor: %w", err)
		}
	}
	if m.eng == nil && m.ew == nil && m.cu == nil {
		return nil, fmt.Errorf("monitor: empty chart set: %w", ErrParam)
	}
	return m, nil
}

// Add takes the next value and returns the alarms it completes, in chart
// order (individuals, EWMA, CUSUM).
func (m *Monitor) Add(x float64) []Alarm {
	i := m.n
	m.n++
	var out []Alarm
	if m.eng != nil {
		for _, f := range m.eng.add((x - m.target) / m.sigma) {
			out = append(out, Alarm{Chart: Individuals, Rule: f.rule, Index: i, Unit: i, Points: f.points, Side: f.side, Onset: -1})
		}
	}
	if m.ew != nil {
		if _, _, _, side := m.ew.add(x); side != 0 {
			out = append(out, Alarm{Chart: EWMA, Rule: EWMASignal, Index: i, Unit: i, Points: []int{i}, Side: side, Onset: -1})
		}
	}
	if m.cu != nil {
		cp, cm, up, down := m.cu.add(x)
		if up {
			out = append(out, cusumAlarm(i, m.cu.np, 1, m.target+m.cu.k*m.sigma+cp/float64(m.cu.np)))
		}
		if down {
			out = append(out, cusumAlarm(i, m.cu.nm, -1, m.target-m.cu.k*m.sigma-cm/float64(m.cu.nm)))
		}
	}
	return out
}
