package driftreport

import (
	"context"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// Values near the float64 limits are refused with line and column, or
// charted with finite limits and a chart that draws; never a centre "-"
// with no error and a --svg that then fails (±1e308 did that).
func TestHugeCSVValues(t *testing.T) {
	dir := t.TempDir()
	write := func(name string, vals ...string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte("serial,trip_pf\n"+strings.Join(vals, "\n")+"\n"), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	rows := func(a, b string, n int) []string {
		var out []string
		for i := range n {
			v := a
			if i%2 == 1 {
				v = b
			}
			out = append(out, fmt.Sprintf("U%03d,%s", i, v))
		}
		return out
	}
	run := func(csv string) (Report, error) {
		return Run(context.Background(), Options{
			CSVFile: csv, Column: "trip_pf", Chart: "watch", Baseline: DefaultBaseline, Alarms: DefaultAlarms,
			LSL: math.NaN(), USL: math.NaN(), UncertaintyGiven: true, UncertaintyPF: 0.3,
			SVG: filepath.Join(dir, "chart.svg"),
		})
	}
	for _, tc := range []struct {
		name string
		vals []string
		err  string
	}{
		{"1e308", append(rows("1", "2", 10), "U100,1e308"), `line 12, column "trip_pf": "1e308" is outside`},
		{"-1e308", append(rows("1", "2", 3), "U100,-1e308"), `line 5, column "trip_pf": "-1e308" is outside`},
		{"1.5e300 pairs", rows("1e300", "-1.5e300", 60), `line 2, column "trip_pf": "1e300" is outside`},
		{"1e-200", append(rows("1", "2", 4), "U100,1e-200"), `line 6, column "trip_pf": "1e-200" is outside`},
		{"NaN", append(rows("1", "2", 4), "U100,NaN"), `line 6, column "trip_pf": "NaN" is not a finite number`},
		{"-Inf", append(rows("1", "2", 4), "U100,-Inf"), `line 6, column "trip_pf": "-Inf" is not a finite number`},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := run(write(tc.name+".csv", tc.vals...))
			if err == nil || !strings.Contains(err.Error(), tc.err) {
				t.Fatalf("err %v, want %q", err, tc.err)
			}
		})
	}
	// At the edges of the range the arithmetic stays finite: the limits
	// are numbers and the chart draws.
	for _, pair := range [][2]string{{"1e150", "-1e150"}, {"1e-150", "2e-150"}, {"0", "1e150"}} {
		t.Run(pair[0]+","+pair[1], func(t *testing.T) {
			rep, err := run(write("edge.csv", rows(pair[0], pair[1], 120)...))
			if err != nil {
				t.Fatal(err)
			}
			for _, g := range rep.Groups {
				for _, c := range g.Charts {
					for _, v := range []Num{c.Center, c.Sigma} {
						if math.IsNaN(float64(v)) || math.IsInf(float64(v), 0) {
							t.Errorf("%s chart: centre %v, σ %v", c.Kind, c.Center, c.Sigma)
						}
					}
				}
			}
			if fi, err := os.Stat(filepath.Join(dir, "chart.svg")); err != nil || fi.Size() == 0 {
				t.Errorf("no chart drawn: %v", err)
			}
		})
	}
}
