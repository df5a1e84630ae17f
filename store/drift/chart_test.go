package drift_test

import (
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"padline/store/drift"
)

func near(a, b, tol float64) bool { return math.Abs(a-b) <= tol }

// Hand-derived: x = 1…5, mean 3, MR̄ = 1, σ = 1/d2(2) = 1/1.128;
// individuals limits 3 ± 3/1.128; MR centre 1, UCL D4(2)·MR̄ = 3.267
// (D4 from DEVELOPERS.md "References"), LCL 0.
func TestIndividualsChartHandWorked(t *testing.T) {
	s, err := drift.IndividualsChart([]float64{1, 2, 3, 4, 5}, drift.FirstN(5), drift.Options{})
	if err != nil {
		t.Fatal(err)
	}
	loc, mr := s.Location, s.Spread
	checks := []struct {
		name      string
		got, want float64
	}{
		{"centre", loc.Center, 3},
		{"sigma", loc.Sigma, 1 / 1.128},
		{"UCL", loc.Upper[4], 3 + 3/1.128},
		{"LCL", loc.Lower[0], 3 - 3/1.128},
		{"MR centre", mr.Center, 1},
		{"MR UCL", mr.Upper[0], 3.267},
		{"MR LCL", mr.Lower[0], 0},
	}
	for _, c := range checks {
		if !near(c.got, c.want, 1e-12) {
			t.Errorf("%s = %.6f, want %.6f", c.name, c.got, c.want)
		}
	}
	if !math.IsNaN(mr.Stat[0]) || mr.Stat[3] != 1 {
		t.Errorf("MR stat %v, want NaN then 1s", mr.Stat)
	}
	if !strings.Contains(loc.Method, "units 1–5 (5 points)") {
		t.Errorf("method %q does not state the window", loc.Method)
	}
}

// Phase I / phase II: limits come from the baseline only, so what follows
// the window cannot move them, and a shift after it is caught.
func TestBaselineAppliesToLaterData(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 5))
	x := make([]float64, 80)
	for i := range x {
		x[i] = 20 + 0.3*rng.NormFloat64()
	}
	w := drift.FirstN(40)
	a, err := drift.IndividualsChart(x, w, drift.Options{Rules: drift.LimitsOnly})
	if err != nil {
		t.Fatal(err)
	}
	y := append([]float64(nil), x...)
	for i := 40; i < 80; i++ {
		y[i] += 3 // 10σ later: limits must not notice, alarms must
	}
	b, err := drift.IndividualsChart(y, w, drift.Options{Rules: drift.LimitsOnly})
	if err != nil {
		t.Fatal(err)
	}
	if a.Location.Center != b.Location.Center || a.Location.Upper[0] != b.Location.Upper[0] {
		t.Errorf("limits moved with phase II data: %g/%g vs %g/%g", a.Location.Center, a.Location.Upper[0], b.Location.Center, b.Location.Upper[0])
	}
	if len(b.Location.Alarms) == 0 || b.Location.Alarms[0].Unit != 40 {
		t.Errorf("individuals alarms %+v, want the first at 40", b.Location.Alarms)
	}
	if got := b.Location.Window.String(); got != "units 1–40 (40 points)" {
		t.Errorf("window %q", got)
	}
}

func TestTimeWindow(t *testing.T) {
	t0 := time.Date(2025, 3, 1, 6, 0, 0, 0, time.UTC)
	times := make([]time.Time, 10)
	for i := range times {
		times[i] = t0.Add(time.Duration(i) * time.Hour)
	}
	w, err := drift.TimeWindow(times, t0.Add(2*time.Hour), t0.Add(5*time.Hour))
	if err != nil {
		t.Fatal(err)
	}
	if w.Start != 2 || w.End != 5 {
		t.Errorf("window [%d,%d), want [2,5)", w.Start, w.End)
	}
	if want := "units 3–5 (3 points), 2025-03-01T08:00:00Z … 2025-03-01T11:00:00Z"; w.String() != want {
		t.Errorf("String %q, want %q", w.String(), want)
	}
	if _, err := drift.TimeWindow(times, t0, t0); !errors.Is(err, drift.ErrWindow) {
		t.Errorf("empty span: err %v", err)
	}
}

// X̄-R and X̄-s limits against the published factors (DEVELOPERS.md "References" table,
// n = 5): X̿ ± A2·R̄ (A2 = 0.577 is 3/(d2√n) rounded, so 1e-3·R̄),
// D3·R̄ … D4·R̄, X̿ ± A3·s̄, B3·s̄ … B4·s̄.
func TestXbarCharts(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	x := make([]float64, 5*25)
	for i := range x {
		x[i] = 16.7 + 0.4*rng.NormFloat64()
	}
	w := drift.FirstN(len(x))
	r, err := drift.XbarRChart(x, 5, w, drift.Options{})
	if err != nil {
		t.Fatal(err)
	}
	sc, err := drift.XbarSChart(x, 5, w, drift.Options{})
	if err != nil {
		t.Fatal(err)
	}
	rbar, sbar, xbb := r.Spread.Center, sc.Spread.Center, r.Location.Center
	if len(r.Location.Stat) != 25 || r.Location.Size != 5 {
		t.Fatalf("points %d size %d", len(r.Location.Stat), r.Location.Size)
	}
	checks := []struct {
		name           string
		got, want, tol float64
	}{
		{"X̄-R UCL", r.Location.Upper[0], xbb + 0.577*rbar, 1e-3 * rbar},
		{"X̄-R LCL", r.Location.Lower[0], xbb - 0.577*rbar, 1e-3 * rbar},
		{"R UCL", r.Spread.Upper[0], 2.114 * rbar, 1e-12},
		{"R LCL", r.Spread.Lower[0], 0, 0},
		{"X̄-s UCL", sc.Location.Upper[0], xbb + 1.427*sbar, 1e-3 * sbar},
		{"s UCL", sc.Spread.Upper[0], 2.089 * sbar, 1e-12},
		{"s LCL", sc.Spread.Lower[0], 0, 0},
		{"σ R̄/d2", r.Location.Sigma, rbar / 2.326, 1e-12},
		{"σ s̄/c4", sc.Location.Sigma, sbar / 0.9400, 1e-12},
	}
	for _, c := range checks {
		if !near(c.got, c.want, c.tol) {
			t.Errorf("%s = %.6f, want %.6f", c.name, c.got, c.want)
		}
	}
}

// The baseline maps onto the whole subgroups inside it, and the alarm's
// Unit is the last observation of its subgroup.
func TestXbarWindowAndUnits(t *testing.T) {
	x := make([]float64, 40)
	for i := range x {
		x[i] = float64(i % 4)
	}
	x[37] = 50
	s, err := drift.XbarRChart(x, 4, drift.Window{Start: 2, End: 30}, drift.Options{Rules: drift.LimitsOnly})
	if err != nil {
		t.Fatal(err)
	}
	if s.Location.Base.Start != 1 || s.Location.Base.End != 7 {
		t.Errorf("base %+v, want subgroups [1,7)", s.Location.Base)
	}
	if len(s.Location.Alarms) != 1 || s.Location.Alarms[0].Index != 9 || s.Location.Alarms[0].Unit != 39 {
		t.Errorf("alarms %+v, want subgroup 9 unit 39", s.Location.Alarms)
	}
}

func TestChartErrors(t *testing.T) {
	x := []float64{1, 2, 3, 4, 5, 6, 7, 8}
	tests := []struct {
		name string
		err  error
		run  func() error
	}{
		{"subgroup 11", drift.ErrSubgroupSize, func() error { _, e := drift.XbarRChart(x, 11, drift.FirstN(8), drift.Options{}); return e }},
		{"subgroup 1", drift.ErrSubgroupSize, func() error { _, e := drift.XbarSChart(x, 1, drift.FirstN(8), drift.Options{}); return e }},
		{"one point", drift.ErrShortBaseline, func() error { _, e := drift.IndividualsChart(x, drift.FirstN(1), drift.Options{}); return e }},
		{"one subgroup", drift.ErrShortBaseline, func() error {
			_, e := drift.XbarRChart(x, 4, drift.Window{Start: 1, End: 8}, drift.Options{})
			return e
		}},
		{"past end", drift.ErrWindow, func() error { _, e := drift.IndividualsChart(x, drift.FirstN(9), drift.Options{}); return e }},
		{"flat", drift.ErrShortBaseline, func() error { _, e := drift.IndividualsChart(rep(2, 5), drift.FirstN(5), drift.Options{}); return e }},
		{"NaN", drift.ErrParam, func() error {
			_, e := drift.IndividualsChart([]float64{1, math.NaN(), 2}, drift.FirstN(3), drift.Options{})
			return e
		}},
		{"lambda", drift.ErrParam, func() error { _, e := drift.EWMAChart(x, drift.FirstN(8), drift.Options{Lambda: 1.5}); return e }},
		{"head start", drift.ErrParam, func() error {
			_, e := drift.CUSUMChart(x, drift.FirstN(8), drift.Options{H: 4, HeadStart: 4})
			return e
		}},
	}
	for _, tc := range tests {
		if err := tc.run(); !errors.Is(err, tc.err) {
			t.Errorf("%s: err %v, want %v", tc.name, err, tc.err)
		}
	}
}
