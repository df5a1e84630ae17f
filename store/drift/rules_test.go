package drift_test

import (
	"fmt"
	"slices"
	"testing"

	"padline/store/drift"
)

// known: centre 0, σ 1, so series values are in σ units.
var known = drift.Options{FixTarget: true, Target: 0, Sigma: 1}

func rep(v float64, n int) []float64 { return slices.Repeat([]float64{v}, n) }

func cat(parts ...[]float64) []float64 { return slices.Concat(parts...) }

func alternate(a, b float64, n int) []float64 {
	s := make([]float64, n)
	for i := range s {
		s[i] = a
		if i%2 == 1 {
			s[i] = b
		}
	}
	return s
}

// Each series is built to trip exactly one rule (definitions:
// DEVELOPERS.md "References", Western Electric Statistical Quality Control
// Handbook 1956 and Nelson, J. Quality Technology 16(4), 1984). The rule
// must fire at the point completing the pattern and not one point early,
// and nothing else may fire up to that point.
func TestRulesFireAtCompletingPoint(t *testing.T) {
	cycle := []float64{0.2, 0.3, -0.2, -0.3}
	tests := []struct {
		rule   drift.Rule
		set    []drift.Rule
		x      []float64
		index  int
		points []int
		side   int
	}{
		{drift.WE1, drift.WesternElectric, []float64{0.5, -0.5, 0.5, 3.2}, 3, []int{3}, 1},
		{drift.WE1, drift.WesternElectric, []float64{0.5, -3.1}, 1, []int{1}, -1},
		{drift.WE2, drift.WesternElectric, []float64{0.5, 2.5, -0.5, 2.5}, 3, []int{1, 3}, 1},
		{drift.WE2, drift.WesternElectric, []float64{-2.5, -2.5}, 1, []int{0, 1}, -1},
		{drift.WE3, drift.WesternElectric, []float64{-0.5, 1.5, 1.5, 0.5, 1.5, 1.5}, 5, []int{1, 2, 4, 5}, 1},
		{drift.WE4, drift.WesternElectric, cat([]float64{-0.5}, rep(0.5, 8)), 8, []int{1, 2, 3, 4, 5, 6, 7, 8}, 1},
		{drift.WE4, drift.WesternElectric, cat([]float64{0.5}, rep(-0.5, 8)), 8, []int{1, 2, 3, 4, 5, 6, 7, 8}, -1},
		{drift.Nelson1, drift.NelsonRules, []float64{0.5, -3.5}, 1, []int{1}, -1},
		{drift.Nelson2, drift.NelsonRules, cat([]float64{-0.5}, rep(0.5, 9)), 9, []int{1, 2, 3, 4, 5, 6, 7, 8, 9}, 1},
		{drift.Nelson3, drift.NelsonRules, []float64{0.4, -0.4, -0.5, -0.3, -0.1, 0.1, 0.3, 0.5}, 7, []int{2, 3, 4, 5, 6, 7}, 1},
		{drift.Nelson3, drift.NelsonRules, []float64{-0.4, 0.4, 0.5, 0.3, 0.1, -0.1, -0.3, -0.5}, 7, []int{2, 3, 4, 5, 6, 7}, -1},
		{drift.Nelson4, drift.NelsonRules, cat([]float64{0.6}, alternate(0.5, -1.5, 14)), 14, []int{1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14}, 0},
		{drift.Nelson5, drift.NelsonRules, []float64{0.5, 2.5, -0.5, 2.5}, 3, []int{1, 3}, 1},
		{drift.Nelson6, drift.NelsonRules, []float64{-0.5, 1.5, 1.5, 0.5, 1.5, 1.5}, 5, []int{1, 2, 4, 5}, 1},
		{drift.Nelson7, drift.NelsonRules, cat([]float64{1.5}, slices.Repeat(cycle, 4)[:15]), 15, []int{1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15}, 0},
		{drift.Nelson8, drift.NelsonRules, cat([]float64{0.5}, alternate(1.5, -1.5, 8)), 8, []int{1, 2, 3, 4, 5, 6, 7, 8}, 0},
	}
	for _, tc := range tests {
		t.Run(fmt.Sprintf("%s/%d", tc.rule, tc.index), func(t *testing.T) {
			o := known
			o.Rules = tc.set
			s, err := drift.IndividualsChart(tc.x, drift.FirstN(len(tc.x)), o)
			if err != nil {
				t.Fatal(err)
			}
			a := s.Location.Alarms
			if len(a) != 1 {
				t.Fatalf("alarms %+v, want exactly one %s at %d", a, tc.rule, tc.index)
			}
			if a[0].Rule != tc.rule || a[0].Index != tc.index || a[0].Unit != tc.index || a[0].Side != tc.side || !slices.Equal(a[0].Points, tc.points) {
				t.Errorf("got %s at %d side %d points %v, want %s at %d side %d points %v",
					a[0].Rule, a[0].Index, a[0].Side, a[0].Points, tc.rule, tc.index, tc.side, tc.points)
			}
			// Point by point: silence until the completing point.
			m, err := drift.NewMonitor(0, 1, o, drift.Set{Rules: tc.set})
			if err != nil {
				t.Fatal(err)
			}
			for i, v := range tc.x {
				got := m.Add(v)
				if i < tc.index && len(got) != 0 {
					t.Errorf("fired early at %d: %+v", i, got)
				}
				if i == tc.index && (len(got) != 1 || got[0].Rule != tc.rule) {
					t.Errorf("monitor at %d: %+v, want %s", i, got, tc.rule)
				}
			}
		})
	}
}

// After a rule fires, its pattern must re-form from fresh points: 16 points
// on one side fire we4 at the 8th and the 16th, not at every point.
func TestRulesRestartAfterFiring(t *testing.T) {
	o := known
	s, err := drift.IndividualsChart(rep(0.5, 16), drift.FirstN(16), o)
	if err != nil {
		t.Fatal(err)
	}
	var at []int
	for _, a := range s.Location.Alarms {
		if a.Rule != drift.WE4 {
			t.Errorf("unexpected %s", a.Rule)
		}
		at = append(at, a.Index)
	}
	if !slices.Equal(at, []int{7, 15}) {
		t.Errorf("we4 at %v, want [7 15]", at)
	}
}

// The zones scale with Width: at width 2 the "2σ" zone is at 4/3.
func TestRulesScaleWithWidth(t *testing.T) {
	o := known
	o.Width = 2
	s, err := drift.IndividualsChart([]float64{1.4, 1.4}, drift.FirstN(2), o)
	if err != nil {
		t.Fatal(err)
	}
	if len(s.Location.Alarms) != 1 || s.Location.Alarms[0].Rule != drift.WE2 {
		t.Errorf("alarms %+v, want one we2", s.Location.Alarms)
	}
	if s.Location.Upper[0] != 2 {
		t.Errorf("UCL %g, want 2", s.Location.Upper[0])
	}
}

func TestRuleDescriptions(t *testing.T) {
	for _, r := range slices.Concat(drift.WesternElectric, drift.NelsonRules,
		[]drift.Rule{drift.EWMASignal, drift.CUSUMUp, drift.CUSUMDown, drift.Limit}) {
		if d := r.Description(); d == "" || d == string(r) {
			t.Errorf("%s: no description", r)
		}
	}
}
