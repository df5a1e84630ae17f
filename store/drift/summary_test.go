package drift_test

import (
	"fmt"
	"math"
	"math/rand/v2"
	"reflect"
	"testing"

	"padline/store/drift"
)

// fullCharts runs plan p the old way, through the chart functions that
// keep every point, and returns their charts and merged alarms.
func fullCharts(x []float64, w drift.Window, o drift.Options, p drift.Plan) ([]drift.Chart, []drift.Alarm, error) {
	switch p.Charts[0] {
	case drift.Xbar:
		var (
			s   drift.Shewhart
			err error
		)
		if p.Charts[1] == drift.Range {
			s, err = drift.XbarRChart(x, p.Subgroup, w, o)
		} else {
			s, err = drift.XbarSChart(x, p.Subgroup, w, o)
		}
		return []drift.Chart{s.Location, s.Spread}, s.Alarms, err
	}
	if len(p.Charts) == 2 && p.Charts[1] == drift.MovingRange {
		s, err := drift.IndividualsChart(x, w, o)
		return []drift.Chart{s.Location, s.Spread}, s.Alarms, err
	}
	set := drift.Set{}
	for _, k := range p.Charts {
		switch k {
		case drift.Individuals:
			set.Rules = o.Rules
			if set.Rules == nil {
				set.Rules = drift.WesternElectric
			}
		case drift.EWMA:
			set.EWMA = true
		case drift.CUSUM:
			set.CUSUM = true
		}
	}
	wt, err := drift.WatchSeries(x, w, o, set)
	return wt.Charts, wt.Alarms, err
}

// sameSummary reports the first difference between a summary and the
// full charts it must reproduce; NaN equals NaN, every other float must
// match to the bit.
func sameSummary(got drift.Summary, charts []drift.Chart, alarms []drift.Alarm, keep int) string {
	if len(got.Charts) != len(charts) {
		return fmt.Sprintf("%d charts, want %d", len(got.Charts), len(charts))
	}
	for i, c := range charts {
		want := c.Summary()
		g := got.Charts[i]
		for _, f := range [][2]float64{{g.Center, want.Center}, {g.Lower, want.Lower}, {g.Upper, want.Upper},
			{g.Zone, want.Zone}, {g.Target, want.Target}, {g.Sigma, want.Sigma}} {
			if math.Float64bits(f[0]) != math.Float64bits(f[1]) && !(math.IsNaN(f[0]) && math.IsNaN(f[1])) {
				return fmt.Sprintf("chart %d: %+v, want %+v", i, g, want)
			}
		}
		g.Center, g.Lower, g.Upper, g.Zone, g.Target, g.Sigma = 0, 0, 0, 0, 0, 0
		want.Center, want.Lower, want.Upper, want.Zone, want.Target, want.Sigma = 0, 0, 0, 0, 0, 0
		if !reflect.DeepEqual(g, want) {
			return fmt.Sprintf("chart %d: %+v, want %+v", i, g, want)
		}
	}
	if got.Alarms != len(alarms) {
		return fmt.Sprintf("%d alarms, want %d", got.Alarms, len(alarms))
	}
	tail := alarms
	if keep > 0 && len(tail) > keep {
		tail = tail[len(tail)-keep:]
	}
	if len(got.Last) != len(tail) {
		return fmt.Sprintf("%d alarms kept, want %d", len(got.Last), len(tail))
	}
	for i := range tail {
		if !reflect.DeepEqual(got.Last[i], tail[i]) {
			return fmt.Sprintf("alarm %d: %+v, want %+v", i, got.Last[i], tail[i])
		}
	}
	return ""
}

// summarySeries are series with every kind of alarm in them: a 1σ and a
// 3σ step, a trend, an alternating stretch, a stretch hugging the centre,
// and the sawtooth of the store's seeded scale log.
func summarySeries() map[string][]float64 {
	rng := rand.New(rand.NewPCG(19, 5))
	out := map[string][]float64{}
	steps := make([]float64, 1500)
	for i := range steps {
		steps[i] = 29.8 + 4.2*rng.NormFloat64()
		switch {
		case i >= 1300:
			steps[i] += 3 * 4.2
		case i >= 700:
			steps[i] += 4.2
		}
	}
	out["steps"] = steps
	shapes := make([]float64, 2000)
	for i := range shapes {
		v := rng.NormFloat64()
		switch {
		case i >= 300 && i < 330:
			v = float64(i-300) * 0.2 // trend
		case i >= 600 && i < 640:
			v = 1.5 * float64(1-2*(i%2)) // alternating
		case i >= 900 && i < 960:
			v *= 0.05 // hugging the centre
		case i >= 1400 && i < 1420:
			v = 1.6 + 0.1*v // beyond 1σ
		}
		shapes[i] = 10 + v
	}
	out["shapes"] = shapes
	saw := make([]float64, 2000)
	for i := range saw {
		saw[i] = 16.7 + 0.01*float64(i%50)
	}
	out["sawtooth"] = saw
	return out
}

// TestSummarizeMatchesCharts: Summarize gives, to the bit, the centre
// lines, limits, σ and alarms (numbers, points, notes) of the chart
// functions that keep every point, for every plan 'padline drift'
// offers, several option sets and baselines, and any number of alarms
// kept.
func TestSummarizeMatchesCharts(t *testing.T) {
	plans := map[string]drift.Plan{
		"watch":       drift.WatchPlan(drift.DefaultSet, 0),
		"watch+ewma":  drift.WatchPlan(drift.Set{Rules: drift.WesternElectric, EWMA: true, CUSUM: true}, 0),
		"imr":         {Charts: []drift.Kind{drift.Individuals, drift.MovingRange}},
		"xbar-r 5":    {Charts: []drift.Kind{drift.Xbar, drift.Range}, Subgroup: 5},
		"xbar-s 4":    {Charts: []drift.Kind{drift.Xbar, drift.StdDev}, Subgroup: 4},
		"xbar-r 10":   {Charts: []drift.Kind{drift.Xbar, drift.Range}, Subgroup: 10},
		"ewma":        {Charts: []drift.Kind{drift.EWMA}},
		"cusum":       {Charts: []drift.Kind{drift.CUSUM}},
		"individuals": {Charts: []drift.Kind{drift.Individuals}},
	}
	options := map[string]drift.Options{
		"defaults":        {},
		"nelson":          {Rules: drift.NelsonRules},
		"width 2.5":       {Width: 2.5, Rules: drift.WesternElectric},
		"given target, σ": {Target: 30, FixTarget: true, Sigma: 4},
		"ewma, cusum set": {Lambda: 0.1, L: 2.7, K: 0.25, H: 4, HeadStart: 2},
		"limits only":     {Rules: drift.LimitsOnly},
	}
	for sname, x := range summarySeries() {
		for pname, p := range plans {
			for oname, o := range options {
				if pname == "watch" && o.Rules == nil {
					o.Rules = drift.DefaultSet.Rules // as 'padline drift' runs the watch
				}
				for _, w := range []drift.Window{drift.FirstN(50), drift.FirstN(len(x)), {Start: 100, End: 400}} {
					charts, alarms, err := fullCharts(x, w, o, p)
					if err != nil {
						t.Fatalf("%s %s %s: %v", sname, pname, oname, err)
					}
					for _, keep := range []int{0, 7} {
						p.Keep, p.Assess = keep, true
						got, err := drift.Summarize(x, w, o, p)
						if err != nil {
							t.Fatalf("%s %s %s keep %d: %v", sname, pname, oname, keep, err)
						}
						if d := sameSummary(got, charts, alarms, keep); d != "" {
							t.Fatalf("%s, %s, %s, baseline %s, keep %d: %s", sname, pname, oname, w, keep, d)
						}
						// The streamed finding is Assess over every alarm, and
						// First is the earliest alarms.
						want := drift.Assess(x, alarms, charts[0].Target, charts[0].Sigma, w)
						if fmt.Sprintf("%+v", got.Finding) != fmt.Sprintf("%+v", want) { // %v prints NaN alike
							t.Fatalf("%s, %s, %s, baseline %s, keep %d: finding %+v, Assess %+v", sname, pname, oname, w, keep, got.Finding, want)
						}
						n := len(alarms)
						if keep > 0 {
							n = min(n, keep)
						}
						if len(got.First) != n || (n > 0 && got.First[0].Seq != 1) {
							t.Fatalf("%s, %s, %s, keep %d: First holds %d alarms, want the first %d", sname, pname, oname, keep, len(got.First), n)
						}
					}
					if len(alarms) == 0 && sname != "sawtooth" {
						t.Logf("%s %s %s %s: no alarms", sname, pname, oname, w)
					}
				}
			}
		}
	}
}

// TestSummarizeErrors: the plan is checked, and the data as the chart
// functions check it.
func TestSummarizeErrors(t *testing.T) {
	x := summarySeries()["steps"]
	for _, tc := range []struct {
		name string
		x    []float64
		p    drift.Plan
	}{
		{"no charts", x, drift.Plan{}},
		{"negative keep", x, drift.Plan{Charts: []drift.Kind{drift.CUSUM}, Keep: -1}},
		{"out of order", x, drift.Plan{Charts: []drift.Kind{drift.CUSUM, drift.Individuals}}},
		{"twice", x, drift.Plan{Charts: []drift.Kind{drift.CUSUM, drift.CUSUM}}},
		{"moving range with cusum", x, drift.Plan{Charts: []drift.Kind{drift.Individuals, drift.MovingRange, drift.CUSUM}}},
		{"x̄ alone", x, drift.Plan{Charts: []drift.Kind{drift.Xbar}, Subgroup: 5}},
		{"subgroup 11", x, drift.Plan{Charts: []drift.Kind{drift.Xbar, drift.Range}, Subgroup: 11}},
		{"NaN", []float64{1, 2, math.NaN(), 4}, drift.Plan{Charts: []drift.Kind{drift.CUSUM}}},
	} {
		if _, err := drift.Summarize(tc.x, drift.FirstN(3), drift.Options{}, tc.p); err == nil {
			t.Errorf("%s: no error", tc.name)
		}
	}
}

// BenchmarkSummarize: the default watch over 600,000 points, with the
// chart functions alongside for comparison.
func BenchmarkSummarize(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 2))
	x := make([]float64, 600_000)
	for i := range x {
		x[i] = 29.8 + 4.2*rng.NormFloat64()
	}
	b.Run("summarize", func(b *testing.B) {
		b.ReportAllocs()
		for b.Loop() {
			if _, err := drift.Summarize(x, drift.FirstN(50), drift.Options{Rules: drift.LimitsOnly}, drift.WatchPlan(drift.DefaultSet, 50)); err != nil {
				b.Fatal(err)
			}
		}
	})
	b.Run("charts", func(b *testing.B) {
		b.ReportAllocs()
		for b.Loop() {
			if _, err := drift.WatchSeries(x, drift.FirstN(50), drift.Options{}, drift.DefaultSet); err != nil {
				b.Fatal(err)
			}
		}
	})
}
