package drift_test

import (
	"fmt"
	"math"
	"testing"

	"padline/store/drift"
)

// Run-length checks, seeded, 4000 runs per cell; each mean is held to four
// standard errors of the published value.
func TestSimulatedARLMatchesPublished(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation")
	}
	tests := []struct {
		name   string
		set    drift.Set
		o      drift.Options
		shift  float64
		want   float64
		source string
	}{
		// Exact: run length is geometric with p = P(|Z| > 3) = 0.0026998.
		{"shewhart ARL0", drift.Set{Rules: drift.LimitsOnly}, drift.Options{}, 0, 370.4, "exact"},
		// Exact: p = Φ(−2) + Φ(−4) = 0.022782.
		{"shewhart 1σ", drift.Set{Rules: drift.LimitsOnly}, drift.Options{}, 1, 43.89, "exact"},
		// Champ & Woodall, Technometrics 29(4), 1987: 91.75 (from memory;
		// a test-only check, never printed).
		{"western electric ARL0", drift.Set{Rules: drift.WesternElectric}, drift.Options{}, 0, 91.75, "Champ & Woodall 1987"},
		// Montgomery, Introduction to SQC, Table 9.3, k = 0.5, h = 4: ARL0
		// 168 (from memory; R spc gives 167.68, see rspc_test.go).
		{"cusum h=4 ARL0", drift.Set{CUSUM: true}, drift.Options{H: 4}, 0, 168, "Montgomery Table 9.3"},
		{"cusum h=4 1σ", drift.Set{CUSUM: true}, drift.Options{H: 4}, 1, 8.38, "Montgomery Table 9.3"},
		{"cusum h=5 1σ", drift.Set{CUSUM: true}, drift.Options{H: 5}, 1, 10.4, "Montgomery Table 9.3"},
	}
	for _, tc := range tests {
		r, err := drift.SimulateRunLength(drift.SimConfig{Set: tc.set, Options: tc.o, Shift: tc.shift, Runs: 4000, Seed: 1})
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(r.Mean-tc.want) > 4*r.SE || r.Censored != 0 {
			t.Errorf("%s: ARL %.1f ± %.1f, %s %.2f", tc.name, r.Mean, r.SE, tc.source, tc.want)
		}
	}
}

// The targets (DEVELOPERS.md "Benchmarks, studies and torture") for the default set: in-control ARL ≥ 150 and a 1σ step
// flagged within a median of 12 units, both zero-state and after 50
// in-control points, with known parameters and with limits estimated from
// a 50-point baseline.
func TestDefaultSetMeetsTargets(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation")
	}
	for _, base := range []int{0, 50} {
		ic, err := drift.SimulateRunLength(drift.SimConfig{Set: drift.DefaultSet, Runs: 4000, Seed: 2, Baseline: base})
		if err != nil {
			t.Fatal(err)
		}
		if ic.Mean-2*ic.SE < 150 {
			t.Errorf("baseline %d: in-control ARL %.1f ± %.1f, want ≥ 150", base, ic.Mean, ic.SE)
		}
		for _, before := range []int{0, 50} {
			r, err := drift.SimulateRunLength(drift.SimConfig{Set: drift.DefaultSet, Shift: 1, Before: before, Runs: 4000, Seed: 3, Baseline: base})
			if err != nil {
				t.Fatal(err)
			}
			if r.Median > 12 {
				t.Errorf("baseline %d, before %d: 1σ median lag %.1f, want ≤ 12", base, before, r.Median)
			}
		}
	}
}

func TestSimulationIsSeeded(t *testing.T) {
	cfg := drift.SimConfig{Set: drift.DefaultSet, Shift: 0.5, Runs: 200, Seed: 7}
	a, err := drift.SimulateRunLength(cfg)
	if err != nil {
		t.Fatal(err)
	}
	b, _ := drift.SimulateRunLength(cfg)
	cfg.Seed = 8
	c, _ := drift.SimulateRunLength(cfg)
	if a.Mean != b.Mean || a.Median != b.Median || a.Mean == c.Mean {
		t.Errorf("seed 7: %.3f %.3f; seed 8: %.3f", a.Mean, b.Mean, c.Mean)
	}
}

// TestStudyTable prints the full study at 20000 runs per cell when asked:
// go test ./store/drift -run StudyTable -v -study
func TestStudyTable(t *testing.T) {
	if !*studyFlag {
		t.Skip("pass -study to print the run-length table")
	}
	rows, err := drift.Study(20000, 1)
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range rows {
		pub := ""
		if !math.IsNaN(r.Published) {
			pub = fmt.Sprintf("published %.4g (%s)", r.Published, r.Source)
		}
		t.Logf("%-45s %3.1fσ  mean %7.1f ± %5.1f  median %5.0f  p10 %4.0f  p90 %5.0f  %s",
			r.Chart, r.Shift, r.Result.Mean, r.Result.SE, r.Result.Median, r.Result.P10, r.Result.P90, pub)
	}
}

func BenchmarkSimulateDefaultInControl(b *testing.B) {
	for b.Loop() {
		if _, err := drift.SimulateRunLength(drift.SimConfig{Set: drift.DefaultSet, Runs: 1000, Seed: 1}); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkWatchSeries100k(b *testing.B) {
	x := stepSeries(1, 100000, 50000, 1)
	b.ReportAllocs()
	for b.Loop() {
		if _, err := drift.WatchSeries(x, drift.FirstN(1000), drift.Options{}, drift.DefaultSet); err != nil {
			b.Fatal(err)
		}
	}
}
