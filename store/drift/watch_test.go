package drift_test

import (
	"math/rand/v2"
	"slices"
	"testing"

	"padline/store/drift"
)

func stepSeries(seed uint64, n, at int, shift float64) []float64 {
	rng := rand.New(rand.NewPCG(seed, 0))
	x := make([]float64, n)
	for i := range x {
		x[i] = 16.7 + 0.2*rng.NormFloat64()
		if i >= at {
			x[i] += shift * 0.2
		}
	}
	return x
}

func TestWatchSeries(t *testing.T) {
	x := stepSeries(3, 200, 120, 2)
	w, err := drift.WatchSeries(x, drift.FirstN(60), drift.Options{}, drift.DefaultSet)
	if err != nil {
		t.Fatal(err)
	}
	if len(w.Charts) != 2 || w.Charts[0].Kind != drift.Individuals || w.Charts[1].Kind != drift.CUSUM {
		t.Fatalf("charts %v", w.Charts)
	}
	for i, a := range w.Alarms {
		if a.Seq != i+1 || (i > 0 && a.Unit < w.Alarms[i-1].Unit) {
			t.Errorf("alarm %d: seq %d unit %d out of order", i, a.Seq, a.Unit)
		}
	}
	a, ok := w.First(120)
	if !ok || a.Unit > 120+20 {
		t.Errorf("first alarm after a 2σ step at 120: %+v %v", a, ok)
	}
	if w.Window.String() != "units 1–60 (60 points)" {
		t.Errorf("window %q", w.Window)
	}
	// The merged list and the per-chart lists carry the same numbers.
	var seqs []int
	for _, c := range w.Charts {
		for _, a := range c.Alarms {
			seqs = append(seqs, a.Seq)
		}
	}
	slices.Sort(seqs)
	if len(seqs) != len(w.Alarms) || (len(seqs) > 0 && seqs[len(seqs)-1] != len(w.Alarms)) {
		t.Errorf("chart seqs %v vs %d merged", seqs, len(w.Alarms))
	}
}

// The monitor, fed the baseline estimates, raises the same alarms as the
// batch charts.
func TestMonitorMatchesBatch(t *testing.T) {
	x := stepSeries(9, 300, 150, 1)
	set := drift.Set{Rules: drift.WesternElectric, EWMA: true, CUSUM: true}
	w, err := drift.WatchSeries(x, drift.FirstN(100), drift.Options{}, set)
	if err != nil {
		t.Fatal(err)
	}
	m, err := drift.NewMonitor(w.Charts[0].Target, w.Charts[0].Sigma, drift.Options{}, set)
	if err != nil {
		t.Fatal(err)
	}
	var got []drift.Alarm
	for _, v := range x {
		got = append(got, m.Add(v)...)
	}
	if len(got) != len(w.Alarms) || len(got) == 0 {
		t.Fatalf("monitor %d alarms, batch %d", len(got), len(w.Alarms))
	}
	for i := range got {
		b := w.Alarms[i]
		if got[i].Rule != b.Rule || got[i].Unit != b.Unit || !slices.Equal(got[i].Points, b.Points) {
			t.Errorf("alarm %d: monitor %s@%d, batch %s@%d", i, got[i].Rule, got[i].Unit, b.Rule, b.Unit)
		}
	}
}
