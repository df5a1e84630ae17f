package store_test

import (
	"context"
	"testing"

	"padline/store"
)

// TestTripValuesMatchTripSeries: the fast read returns the same points, in
// the same order, as the full one, with only its three fields filled.
func TestTripValuesMatchTripSeries(t *testing.T) {
	db, _ := openTemp(t)
	hash := putDemo(t, db)
	ctx := context.Background()
	for i := range 120 {
		if _, err := db.Record(ctx, demoRun(i, hash)); err != nil {
			t.Fatal(err)
		}
	}
	for _, last := range []int{0, 7} {
		f := store.Filter{Variant: "QM-205"}
		full, err := db.TripSeries(ctx, f, last)
		if err != nil {
			t.Fatal(err)
		}
		fast, err := db.TripValues(ctx, f, last)
		if err != nil {
			t.Fatal(err)
		}
		if len(full) != len(fast) || len(full) == 0 {
			t.Fatalf("last %d: %d vs %d points", last, len(full), len(fast))
		}
		for i := range full {
			a, b := full[i], fast[i]
			if a.RunID != b.RunID || !a.Finished.Equal(b.Finished) || a.TripPF != b.TripPF {
				t.Fatalf("last %d, point %d: %+v vs %+v", last, i, a, b)
			}
			if b.Station != "" || b.Fixture != "" || b.Lot != "" || b.Verdict != "" {
				t.Fatalf("fast read filled group fields: %+v", b)
			}
		}
	}
}

// TestRecentValues: the newest passing runs' values of one measurement,
// newest first, at most n, from the variant at the station only.
func TestRecentValues(t *testing.T) {
	db, _ := openTemp(t)
	hash := putDemo(t, db)
	ctx := context.Background()
	for i := range 60 {
		if _, err := db.Record(ctx, demoRun(i, hash)); err != nil {
			t.Fatal(err)
		}
	}
	got, err := db.RecentValues(ctx, "QM-205", "L2-S1", "trip_search", "trip_pf", 5)
	if err != nil {
		t.Fatal(err)
	}
	// Runs 59 down: 56 (i%17 == 5) failed, so 59, 58, 57, 55, 54.
	var want []float64
	for _, i := range []int{59, 58, 57, 55, 54} {
		want = append(want, 16.7+0.01*float64(i%50))
	}
	if len(got) != len(want) {
		t.Fatalf("got %v, want %v", got, want)
	}
	for i := range want {
		if got[i] != want[i] {
			t.Fatalf("got %v, want %v", got, want)
		}
	}
	for _, c := range [][2]string{{"QM-212", "L2-S1"}, {"QM-205", "L9-S9"}} {
		if got, err := db.RecentValues(ctx, c[0], c[1], "trip_search", "trip_pf", 5); err != nil || len(got) != 0 {
			t.Errorf("%v: %v %v, want none", c, got, err)
		}
	}
}
