package driftreport

import (
	"context"
	"flag"
	"fmt"
	"math"
	"math/rand/v2"
	"path/filepath"
	"reflect"
	"slices"
	"testing"
	"time"

	"padline/sequences"
	"padline/store"
	"padline/store/drift"
)

// sameAnalysis reports the first difference between the report's one-pass
// summary and the charts built with every point (the computation 'padline
// drift' used before the summary): centre lines, limits, σ, point and
// alarm counts, and the alarms listed, to the bit.
func sameAnalysis(an driftAnalysis, keep int) string {
	if len(an.sum.Charts) != len(an.charts) {
		return fmt.Sprintf("%d charts summarised, %d built", len(an.sum.Charts), len(an.charts))
	}
	var all []drift.Alarm
	for i, c := range an.charts {
		got, want := an.sum.Charts[i], c.Summary()
		if !reflect.DeepEqual(nanZero(got), nanZero(want)) {
			return fmt.Sprintf("chart %s: %+v, want %+v", c.Kind, got, want)
		}
		all = append(all, c.Alarms...)
	}
	slices.SortFunc(all, func(a, b drift.Alarm) int { return a.Seq - b.Seq })
	for i, a := range all {
		if a.Seq != i+1 {
			return fmt.Sprintf("built charts number alarm %d as %d", i+1, a.Seq)
		}
	}
	if an.sum.Alarms != len(all) {
		return fmt.Sprintf("%d alarms, want %d", an.sum.Alarms, len(all))
	}
	if keep > 0 && len(all) > keep {
		all = all[len(all)-keep:]
	}
	if len(an.sum.Last) != len(all) {
		return fmt.Sprintf("%d alarms listed, want %d", len(an.sum.Last), len(all))
	}
	for i := range all {
		if !reflect.DeepEqual(an.sum.Last[i], all[i]) {
			return fmt.Sprintf("alarm listed %d: %+v, want %+v", i, an.sum.Last[i], all[i])
		}
	}
	return ""
}

// nanZero maps NaN limits to zero so that DeepEqual compares the rest
// exactly (NaN never equals itself).
func nanZero(c drift.ChartSummary) drift.ChartSummary {
	for _, f := range []*float64{&c.Center, &c.Lower, &c.Upper, &c.Zone, &c.Target, &c.Sigma} {
		if math.IsNaN(*f) {
			*f = 0
		}
	}
	return c
}

// checkSameOnLog compares the summary with the full charts for every
// --chart, with and without --by, on the shift log at path.
func checkSameOnLog(t *testing.T, path string, alarms int) {
	t.Helper()
	ctx := context.Background()
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	checked := 0
	for _, by := range []string{"", "station", "shift"} {
		for _, all := range []bool{false, true} {
			groups, err := driftGroups(ctx, db, store.Filter{Variant: "QM-205"}, by, all)
			if err != nil || len(groups) == 0 {
				t.Fatalf("by %q: %d groups, %v", by, len(groups), err)
			}
			for _, chartKind := range []string{"watch", "imr", "xbar-r", "xbar-s", "ewma", "cusum"} {
				for _, rules := range []string{"", "nelson"} {
					o := Options{Chart: chartKind, Rules: rules, Subgroup: 5, Baseline: DefaultBaseline, Alarms: alarms}
					for _, g := range groups {
						if len(g.x) < 2*o.Subgroup {
							continue
						}
						an, err := analyseSeries(g.x, o, 10.3, 59.7, true)
						if err != nil {
							t.Fatalf("%s by %q %s: %v", chartKind, by, g.key, err)
						}
						if d := sameAnalysis(an, o.Alarms); d != "" {
							t.Fatalf("%s, rules %q, by %q, group %q, all verdicts %v: %s", chartKind, rules, by, g.key, all, d)
						}
						checked++
					}
				}
			}
		}
	}
	t.Logf("%s: %d analyses the same both ways", filepath.Base(path), checked)
}

// sameDB is a shift log to check as well, e.g. the 1,000,000-run log of
// cmd/padline's TestDriftScale (-drift.scale.db there).
var sameDB = flag.String("same.db", "", "TestDriftSameResults: also check this shift log")

// seedLog writes n QM-205 runs 4 s apart into a new shift log: trip points
// N(29.8, 4.2) pF (the model's Monte Carlo spread, 'padline limits
// --variant QM-205') with a step of stepPF from run stepAt on (0: none), on
// two stations, 2 % failing.
func seedLog(t *testing.T, path string, n, stepAt int, stepPF float64, seed uint64) {
	t.Helper()
	ctx := context.Background()
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	hash, err := db.PutVariant(ctx, "QM-205", []byte("name: QM-205\n"))
	if err != nil {
		t.Fatal(err)
	}
	r := rand.New(rand.NewPCG(seed, 2))
	t0 := time.Date(2026, 1, 5, 6, 0, 0, 0, time.UTC)
	runs := func(yield func(*sequences.Run) bool) {
		for i := range n {
			trip := 29.8 + 4.2*r.NormFloat64()
			if stepAt > 0 && i >= stepAt {
				trip += stepPF
			}
			v, code := sequences.Pass, sequences.FailCode("")
			if i%50 == 7 {
				v, code = sequences.Fail, sequences.CodeTripHigh
			}
			fin := t0.Add(time.Duration(i) * 4 * time.Second)
			run := &sequences.Run{Serial: fmt.Sprintf("QM205-%06d", i+1), Variant: "QM-205", ConfigHash: hash,
				Station: fmt.Sprintf("L%d-S1", 1+i%2), Fixture: "FX-07", Started: fin.Add(-90 * time.Millisecond), Finished: fin,
				Verdict: v, FailCode: code, Driver: "sim",
				Measurements: []sequences.Measurement{{Step: store.TripStep, Name: store.TripName, Value: trip, Unit: "pF", Low: 10.3, High: 59.7, Verdict: v}}}
			if !yield(run) {
				return
			}
		}
	}
	if _, err := db.Import(ctx, runs, 1000); err != nil {
		t.Fatal(err)
	}
}

// TestDriftSameResults: on shift logs with a step of 4 pF (about 1σ) and
// a quiet one of another seed, the report's one-pass summary comes out
// exactly as the charts built with every point give it: same alarms, same
// centre lines and limits. With -same.db it checks that log too.
func TestDriftSameResults(t *testing.T) {
	dir := t.TempDir()
	for i, c := range []struct {
		n, at int
		step  float64
		seed  uint64
	}{{400, 200, 4, 1}, {300, 0, 0, 7}} {
		path := filepath.Join(dir, fmt.Sprintf("log-%d.db", i))
		seedLog(t, path, c.n, c.at, c.step, c.seed)
		checkSameOnLog(t, path, 0)
		checkSameOnLog(t, path, 3)
	}
	if *sameDB != "" {
		checkSameOnLog(t, *sameDB, DefaultAlarms)
	}
}
