package store_test

import (
	"context"
	"fmt"
	"testing"

	"padline/sequences"
	"padline/store"
)

// PendingRuns, which reads runs and measurements with two queries, returns
// what Runs (one joined query) returns for the same runs: every field,
// measurements in recorded order, runs without measurements, panel runs
// and station faults included, page by page from any cursor.
func TestPendingRunsMatchRuns(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	hash := putDemo(t, db)
	for i := range 40 {
		r := demoRun(i, hash)
		r.Driver = "sim"
		switch i % 10 {
		case 3: // a station fault without measurements
			r.Verdict, r.FailCode, r.Fault, r.Measurements = sequences.StationFault, "lid_open", "lid open at start", nil
		case 6: // a panel site
			r.Panel, r.Site = "QM205-P0001", 2
		case 8: // one measurement only
			r.Measurements = r.Measurements[2:3]
		}
		if _, err := db.Record(ctx, r); err != nil {
			t.Fatal(err)
		}
	}
	var want []string
	for e, err := range db.Runs(ctx, store.Filter{}) {
		if err != nil {
			t.Fatal(err)
		}
		want = append(want, fmt.Sprintf("%+v", *e))
	}
	if len(want) != 40 {
		t.Fatalf("Runs read %d runs, want 40", len(want))
	}
	for _, page := range []int{1, 7, 40, 100} {
		var got []string
		after := int64(0)
		for {
			runs, err := db.PendingRuns(ctx, after, page)
			if err != nil {
				t.Fatal(err)
			}
			if len(runs) == 0 {
				break
			}
			if len(runs) > page {
				t.Fatalf("page of %d: %d runs", page, len(runs))
			}
			for _, e := range runs {
				got = append(got, fmt.Sprintf("%+v", *e))
				after = e.ID
			}
		}
		if len(got) != len(want) {
			t.Fatalf("pages of %d: %d runs, want %d", page, len(got), len(want))
		}
		for i := range want {
			if got[i] != want[i] {
				t.Fatalf("pages of %d, run %d:\n got %s\nwant %s", page, i, got[i], want[i])
			}
		}
	}
}
