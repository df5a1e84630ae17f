package drift_test

import (
	"fmt"

	"padline/store/drift"
)

// Montgomery's Example 9.1 data through the tabular CUSUM.
func ExampleCUSUMChart() {
	c, err := drift.CUSUMChart(montgomery, drift.FirstN(len(montgomery)),
		drift.Options{Target: 10, FixTarget: true, Sigma: 1, K: 0.5, H: 5})
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, a := range c.Alarms {
		fmt.Printf("%d. point %d: %s (%s); %s\n", a.Seq, a.Index+1, a.Rule, a.Description(), a.Note)
	}
	// Output:
	// 1. point 29: cusum+ (upper CUSUM above H); change after point 22, mean now ≈ 11.25
}

func ExampleWatchSeries() {
	x := []float64{16.7, 16.9, 16.6, 16.8, 16.7, 16.5, 16.8, 16.7, 16.6, 16.8, 18.1, 16.7}
	w, err := drift.WatchSeries(x, drift.FirstN(10), drift.Options{}, drift.DefaultSet)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println("baseline:", w.Window)
	for _, a := range w.Alarms {
		fmt.Printf("%d. unit %d, %s %s: %s\n", a.Seq, a.Unit+1, a.Chart, a.Rule, a.Description())
	}
	// Output:
	// baseline: units 1–10 (10 points)
	// 1. unit 11, individuals we1: 1 point beyond 3σ
	// 2. unit 11, cusum cusum+: upper CUSUM above H
}
