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
