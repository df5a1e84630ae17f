package main

import (
	"context"
	"fmt"
	"math"
	"path/filepath"
	"reflect"
	"slices"
	"testing"

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
					o := driftOptions{chart: chartKind, rules: rules, subgroup: 5, baseline: driftDefaultBaseline, alarms: alarms}
					for _, g := range groups {
						if len(g.x) < 2*o.subgroup {
							continue
						}
						an, err := analyseSeries(g.x, o, 10.3, 59.7, true)
						if err != nil {
							t.Fatalf("%s by %q %s: %v", chartKind, by, g.key, err)
						}
						if d := sameAnalysis(an, o.alarms); d != "" {
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

// TestDriftSameResults: on the demo's shift logs (with a step of 4 pF, and
// a quiet one of another seed) the report 'padline drift' prints now comes
// out exactly as the charts built with every point give it: same alarms,
// same centre lines and limits. With -drift.scale.db it checks the
// 1,000,000-run log too (see TestDriftScale).
func TestDriftSameResults(t *testing.T) {
	dir := t.TempDir()
	for i, args := range [][]string{
		{"--units", "400", "--drift-at", "200", "--drift-pf", "4"},
		{"--units", "300", "--seed", "7"},
	} {
		path := filepath.Join(dir, fmt.Sprintf("demo-%d.db", i))
		if _, errs, code := runPadline(t, context.Background(), "", append([]string{"demo", "--db", path}, args...)...); code != 0 {
			t.Fatalf("demo %v: %s", args, errs)
		}
		checkSameOnLog(t, path, 0)
		checkSameOnLog(t, path, 3)
	}
	if *driftScaleDB != "" {
		checkSameOnLog(t, *driftScaleDB, driftDefaultAlarms)
	}
}
