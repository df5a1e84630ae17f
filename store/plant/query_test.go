package plant_test

import (
	"context"
	"reflect"
	"testing"
	"time"

	"padline/store"
	"padline/store/plant"
)

// The streamed trip series (binary decoding, and the rows.Scan path a
// connection asking for text results takes) and the runs found by id and
// time in one query are what each station's shift log gives for its runs.
// Both stations test at the same instants with the same run ids, so a
// lookup by id and time must pick the run Runs lists first.
func TestTripsAndRunsAtSameAsShiftLog(t *testing.T) {
	ctx := context.Background()
	url, _ := newSchema(t, baseURL())
	p := openPlant(t, url)
	register(t, p, plant.Station{Name: "L1-S1", Line: "L1"}, plant.Station{Name: "L2-S1", Line: "L2"})
	start := time.Date(2026, 10, 31, 23, 0, 0, 0, time.UTC) // crosses a month boundary
	logs := map[string]*store.DB{}
	for i, st := range []string{"L1-S1", "L2-S1"} {
		logs[st] = stationLog(t, tempLog(t, st), st, 1500, start, uint64(i+1))
		if err := forwarder(logs[st], p, st).Drain(ctx); err != nil {
			t.Fatal(err)
		}
	}
	// A text-format connection: pgx's simple protocol returns every
	// value as text, so the series is read with rows.Scan.
	text := openPlant(t, withParam(url, "default_query_exec_mode=simple_protocol"))
	for st, log := range logs {
		for _, groups := range []bool{true, false} {
			f := store.Filter{Station: st, Variant: "QM-205"}
			var want []store.TripPoint
			for pt, err := range log.Trips(ctx, f, groups) {
				if err != nil {
					t.Fatal(err)
				}
				want = append(want, pt)
			}
			if len(want) < 1000 {
				t.Fatalf("%s: %d trip points in the shift log", st, len(want))
			}
			for name, db := range map[string]*plant.DB{"binary": p, "text": text} {
				var got []store.TripPoint
				for pt, err := range db.Trips(ctx, f, groups) {
					if err != nil {
						t.Fatal(err)
					}
					if groups && pt.Line != st[:2] {
						t.Fatalf("%s %s: line %q", st, name, pt.Line)
					}
					pt.Line = "" // the shift log knows no lines
					got = append(got, pt)
				}
				if !reflect.DeepEqual(got, want) {
					t.Fatalf("%s %s trips (groups %v) differ from the shift log: %d vs %d points", st, name, groups, len(got), len(want))
				}
			}
		}
	}
	// Both logs hold the same ids at the same times; L1-S1's shift log
	// was forwarded first (the lower log id), so its runs come first.
	log := logs["L1-S1"]
	pts, err := log.TripValues(ctx, store.Filter{Variant: "QM-205"}, 0)
	if err != nil {
		t.Fatal(err)
	}
	{
		var (
			ids  []int64
			ats  []time.Time
			want []store.Entry
		)
		for i := 0; i < len(pts); i += 7 {
			ids, ats = append(ids, pts[i].RunID), append(ats, pts[i].Finished)
			w := log.RunAt(ctx, "QM-205", pts[i].RunID, pts[i].Finished)
			w.Measurements = nil // RunsAt leaves them out
			want = append(want, w)
		}
		// Absent: an id with no run at that time.
		ids, ats, want = append(ids, 999_999), append(ats, pts[0].Finished), append(want, store.Entry{})
		got, err := p.RunsAt(ctx, "QM-205", ids, ats)
		if err != nil {
			t.Fatal(err)
		}
		for i := range want {
			if sameEntries([]*store.Entry{&got[i]}, []*store.Entry{&want[i]}) != "" || got[i].Station != want[i].Station {
				t.Fatalf("run %d at %v: plant %+v, shift log %+v", ids[i], ats[i], got[i], want[i])
			}
		}
		// The plant names the run its Runs lists first over that
		// nanosecond.
		for i := range want[:len(want)-1] {
			var first *store.Entry
			for e, err := range p.Runs(ctx, store.Filter{Variant: "QM-205", Since: ats[i], Until: ats[i].Add(1)}) {
				if err != nil {
					t.Fatal(err)
				}
				if e.ID == ids[i] {
					first = e
					break
				}
			}
			if first == nil || first.Serial != got[i].Serial {
				t.Fatalf("run %d at %v: RunsAt %q, Runs first %+v", ids[i], ats[i], got[i].Serial, first)
			}
		}
		if none, err := p.RunsAt(ctx, "QM-999", ids[:3], ats[:3]); err != nil || !reflect.DeepEqual(none, make([]store.Entry, 3)) {
			t.Fatalf("runs of an unknown variant: %+v, %v", none, err)
		}
	}
}
