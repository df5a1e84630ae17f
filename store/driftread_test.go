package store_test

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"padline/sequences"
	"padline/store"
)

// seedMixed records n runs of two variants over three stations, four
// fixtures and lots of 40, with retests (a serial tested again later),
// station faults, runs without a trip point and runs finishing at the same
// nanosecond, so every order and every first-verdict rule is exercised.
func seedMixed(t *testing.T, db *store.DB, n int) {
	t.Helper()
	ctx := context.Background()
	hash := putDemo(t, db)
	h212, err := db.PutVariant(ctx, "QM-212", []byte("variant: QM-212\n"))
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(19, 1))
	runs := make([]*sequences.Run, 0, n)
	for i := range n {
		serial := i
		if i > 10 && rng.IntN(8) == 0 {
			serial = rng.IntN(i) // a retest of an earlier unit
		}
		r := demoRun(serial, hash)
		r.Finished = t0.Add(time.Duration(i) * 3 * time.Second)
		if i%23 == 4 {
			r.Finished = runs[i-1].Finished // same nanosecond as the run before
		}
		r.Started = r.Finished.Add(-2 * time.Second)
		r.Station = fmt.Sprintf("L1-S%d", 1+rng.IntN(3))
		r.Fixture = fmt.Sprintf("FX-%02d", 7+rng.IntN(4))
		r.Lot = fmt.Sprintf("LOT-%d", i/40)
		r.Driver = []string{"gpio", "sim"}[i%7/5] // mostly real, some simulated
		if i%3 == 0 {
			r.Panel, r.Site = fmt.Sprintf("P-%d", i/12), 1+i%4 // some on panels
		}
		if i%5 == 3 {
			r.Variant, r.ConfigHash = "QM-212", h212
		}
		switch rng.IntN(12) {
		case 0:
			r.Verdict, r.FailCode = sequences.StationFault, "lid_open"
			r.Measurements = r.Measurements[:2] // no trip search
		case 1:
			r.Verdict, r.FailCode = sequences.Fail, "trip_high"
		case 2:
			r.Verdict, r.FailCode = sequences.Fail, "no_trip"
			r.Measurements[2].Value = math.NaN() // no trip point
		default:
			r.Verdict, r.FailCode = sequences.Pass, ""
		}
		if len(r.Measurements) > 2 {
			r.Measurements[2].Value += 0.5 * rng.NormFloat64()
		}
		runs = append(runs, r)
	}
	for _, r := range runs {
		if _, err := db.Record(ctx, r); err != nil {
			t.Fatal(err)
		}
	}
}

// mixedFilters are the selections 'padline drift' makes: a variant,
// passing units, a station, fixture or lot, a shift's time range.
var mixedFilters = []store.Filter{
	{},
	{Variant: "QM-205"},
	{Variant: "QM-205", Verdict: sequences.Pass},
	{Variant: "QM-205", Station: "L1-S2"},
	{Variant: "QM-205", Fixture: "FX-09", Verdict: sequences.Pass},
	{Variant: "QM-212", Lot: "LOT-3"},
	{Variant: "QM-205", Since: t0.Add(5 * time.Minute), Until: t0.Add(17 * time.Minute)},
	{Variant: "QM-205", Since: t0.Add(7 * time.Minute)},
	{Variant: "QM-205", Driver: "gpio", Verdict: sequences.Pass},
	{Variant: "QM-205", Site: 2},
	{Variant: "QM-205", Site: -1, Verdict: sequences.Pass},
}

// TestTripsMatchRuns: the trip series read from the covering index is,
// point for point, what the full runs with their measurements (Runs, a
// join over the tables) say, oldest first; its last points are the tail.
func TestTripsMatchRuns(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	seedMixed(t, db, 600)
	for _, f := range mixedFilters {
		var want []store.TripPoint
		for e, err := range db.Runs(ctx, f) {
			if err != nil {
				t.Fatal(err)
			}
			if !math.IsNaN(e.TripPF) {
				want = append(want, store.TripPoint{RunID: e.ID, Finished: e.Finished, TripPF: e.TripPF,
					Station: e.Station, Fixture: e.Fixture, Lot: e.Lot, Verdict: e.Verdict, Site: e.Site})
			}
		}
		if len(want) < 5 {
			t.Fatalf("filter %+v: only %d points, the seed is too thin", f, len(want))
		}
		var got []store.TripPoint
		for p, err := range db.Trips(ctx, f, true) {
			if err != nil {
				t.Fatal(err)
			}
			got = append(got, p)
		}
		check := func(what string, got, want []store.TripPoint, groups bool) {
			t.Helper()
			if len(got) != len(want) {
				t.Fatalf("filter %+v, %s: %d points, want %d", f, what, len(got), len(want))
			}
			for i := range want {
				w := want[i]
				if !groups {
					w.Station, w.Fixture, w.Lot, w.Verdict, w.Site = "", "", "", "", 0
				}
				if g := got[i]; g.RunID != w.RunID || !g.Finished.Equal(w.Finished) || g.TripPF != w.TripPF ||
					g.Station != w.Station || g.Fixture != w.Fixture || g.Lot != w.Lot || g.Verdict != w.Verdict || g.Site != w.Site {
					t.Fatalf("filter %+v, %s, point %d: %+v, want %+v", f, what, i, g, w)
				}
			}
		}
		check("Trips", got, want, true)
		values, err := db.TripValues(ctx, f, 0)
		if err != nil {
			t.Fatal(err)
		}
		check("TripValues", values, want, false)
		last, err := db.TripSeries(ctx, f, 7)
		if err != nil {
			t.Fatal(err)
		}
		check("last 7", last, want[len(want)-7:], true)
	}
}

// TestCountsMatchHistory: Counts agrees with the definition worked out in
// Go over every run of the log: a run is its serial's first unit verdict
// when no run of the serial that is not a station fault comes before it by
// (finish time, id).
func TestCountsMatchHistory(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	seedMixed(t, db, 600)
	type key struct {
		fin int64
		id  int64
	}
	first := map[string]key{}
	var all []*store.Entry
	for e, err := range db.Runs(ctx, store.Filter{}) {
		if err != nil {
			t.Fatal(err)
		}
		all = append(all, e)
		if e.Verdict == sequences.StationFault {
			continue
		}
		k, seen := first[e.Serial]
		if nk := (key{e.Finished.UnixNano(), e.ID}); !seen || nk.fin < k.fin || (nk.fin == k.fin && nk.id < k.id) {
			first[e.Serial] = nk
		}
	}
	in := func(f store.Filter, e *store.Entry) bool {
		fin := e.Finished
		return (f.Variant == "" || e.Variant == f.Variant) && (f.Driver == "" || e.Driver == f.Driver) &&
			(f.Site == 0 || (f.Site > 0 && e.Site == f.Site) || (f.Site < 0 && e.Site == 0)) && (f.Station == "" || e.Station == f.Station) &&
			(f.Fixture == "" || e.Fixture == f.Fixture) && (f.Lot == "" || e.Lot == f.Lot) &&
			(f.Verdict == "" || e.Verdict == f.Verdict) && (f.Since.IsZero() || !fin.Before(f.Since)) &&
			(f.Until.IsZero() || fin.Before(f.Until))
	}
	repeats := 0
	for _, f := range mixedFilters {
		var want store.Counts
		for _, e := range all {
			if !in(f, e) {
				continue
			}
			want.Runs++
			switch e.Verdict {
			case sequences.Pass:
				want.Pass++
			case sequences.Fail:
				want.Fail++
			default:
				want.StationFault++
			}
			if e.Verdict != sequences.StationFault {
				if first[e.Serial] == (key{e.Finished.UnixNano(), e.ID}) {
					want.FirstUnits++
					if e.Verdict == sequences.Pass {
						want.FirstPass++
					}
				} else {
					repeats++
				}
			}
		}
		got, err := db.Counts(ctx, f)
		if err != nil {
			t.Fatal(err)
		}
		if got != want {
			t.Errorf("filter %+v: Counts %+v, want %+v", f, got, want)
		}
	}
	if repeats == 0 {
		t.Fatal("the seed has no retests: the first-verdict rule is not exercised")
	}
}

// TestDriftQueriesCovered: the trip series and the yield count read the
// indexes of migration 0006 alone (SQLite docs, "EXPLAIN QUERY PLAN":
// "USING COVERING INDEX" means the table is never visited), never sort
// (no "TEMP B-TREE"), and the first-verdict probe runs once per run.
func TestDriftQueriesCovered(t *testing.T) {
	db, _ := openTemp(t)
	seedMixed(t, db, 200)
	for _, stats := range []string{"no statistics", "after ANALYZE"} {
		if stats == "after ANALYZE" {
			if err := store.Exec(db, "ANALYZE"); err != nil {
				t.Fatal(err)
			}
		}
		for _, f := range mixedFilters[1:] {
			plans, err := store.DriftPlans(db, f)
			if err != nil {
				t.Fatal(err)
			}
			for name, plan := range plans {
				if !strings.Contains(plan, "COVERING INDEX runs_variant_trip") || strings.Contains(plan, "TEMP B-TREE") {
					t.Errorf("%s, %s, filter %+v: not read from the covering index in its order:\n%s", stats, name, f, plan)
				}
				if name != "counts" {
					continue
				}
				if !strings.Contains(plan, "COVERING INDEX runs_serial_verdict") || strings.Count(plan, "CORRELATED") != 1 {
					t.Errorf("%s, filter %+v: the first-verdict probe is not one covered probe per run:\n%s", stats, f, plan)
				}
			}
		}
	}
}

// TestDriversBySeeks: the distinct drivers, found one index seek each,
// are those recorded, in order, "" included; none in an empty log.
func TestDriversBySeeks(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	if got, err := db.Drivers(ctx); err != nil || len(got) != 0 {
		t.Fatalf("empty log: %q, %v", got, err)
	}
	hash := putDemo(t, db)
	for i, d := range []string{"sim", "", "gpio", "sim", ""} {
		r := demoRun(i, hash)
		r.Driver = d
		if _, err := db.Record(ctx, r); err != nil {
			t.Fatal(err)
		}
	}
	if got, err := db.Drivers(ctx); err != nil || strings.Join(got, ",") != ",gpio,sim" {
		t.Fatalf("Drivers = %q, %v; want \"\", gpio, sim", got, err)
	}
}
