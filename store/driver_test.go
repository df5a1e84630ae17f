package store_test

import (
	"context"
	"slices"
	"testing"

	"padline/sequences"
	"padline/store"
)

// Every run keeps the driver that produced it and a station fault's
// message, and a filter can keep one driver's runs.
func TestRunDriverAndFault(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	hash := putDemo(t, db)
	sim := demoRun(1, hash)
	sim.Driver = "sim"
	gpio := demoRun(2, hash)
	gpio.Driver = "gpio"
	gpio.Verdict, gpio.FailCode = sequences.StationFault, sequences.CodePinError
	gpio.Fault = "fixture: pin GPIO17 (power): write failed"
	for _, r := range []*sequences.Run{sim, gpio} {
		if _, err := db.Record(ctx, r); err != nil {
			t.Fatal(err)
		}
	}
	if got, err := db.Drivers(ctx); err != nil || !slices.Equal(got, []string{"gpio", "sim"}) {
		t.Fatalf("Drivers = %v, %v", got, err)
	}
	var got []*store.Entry
	for e, err := range db.Runs(ctx, store.Filter{Driver: "gpio"}) {
		if err != nil {
			t.Fatal(err)
		}
		got = append(got, e)
	}
	if len(got) != 1 || got[0].Serial != gpio.Serial || got[0].Driver != "gpio" || got[0].Fault != gpio.Fault {
		t.Fatalf("gpio runs %+v", got)
	}
}
