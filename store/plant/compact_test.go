package plant_test

import (
	"context"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"padline/store/plant"
)

// Compact rebuilds the partitions of closed months only, once: again only
// when a month gained a tenth more runs (a station that was offline when it
// closed), and after an interrupted rebuild it drops the invalid index
// left behind first. A second compact at the same time, and a station's
// role, are refused.
func TestCompactClosedMonths(t *testing.T) {
	url, schema := newSchema(t, baseURL())
	ctx := context.Background()
	p := openPlant(t, url)
	register(t, p, plant.Station{Name: "C-S1"}, plant.Station{Name: "C-S2"}, plant.Station{Name: "C-S3"},
		plant.Station{Name: "C-S4", Role: schema + "_s4"})
	// C-S1: 900 runs on 30 September from 23:00 (one every 4 s), 1,100 on
	// 1 October; C-S2: 300 runs in November, the open month.
	forward := func(station string, n int, start time.Time, seed uint64) {
		t.Helper()
		log := stationLog(t, tempLog(t, station), station, n, start, seed)
		if err := forwarder(log, p, station).Drain(ctx); err != nil {
			t.Fatal(err)
		}
	}
	forward("C-S1", 2000, time.Date(2026, 9, 30, 23, 0, 0, 0, time.UTC), 1)
	forward("C-S2", 300, time.Date(2026, 11, 10, 8, 0, 0, 0, time.UTC), 2)
	now := time.Date(2026, 11, 15, 12, 0, 0, 0, time.UTC)

	files := func(table string) string {
		t.Helper()
		var s string
		if err := p.QueryRowForTest(ctx, `SELECT string_agg(c.relfilenode::text, ',' ORDER BY c.relname) FROM pg_index x
			JOIN pg_class c ON c.oid = x.indexrelid WHERE x.indrelid = $1::regclass`, &s, pgx.Identifier{schema, table}.Sanitize()); err != nil {
			t.Fatal(err)
		}
		return s
	}
	type want struct {
		table string
		rows  int64
		kept  bool
	}
	check := func(got []plant.Rebuilt, ws ...want) {
		t.Helper()
		if len(got) != len(ws) {
			t.Fatalf("compact looked at %+v, want %v", got, ws)
		}
		for i, w := range ws {
			g := got[i]
			if g.Table != w.table || g.Rows != w.rows || g.Kept != w.kept || g.IndexBytesBefore <= 0 {
				t.Fatalf("partition %d: %+v, want %+v", i, g, w)
			}
			if g.Kept && (g.RowsThen == 0 || g.IndexBytesAfter != g.IndexBytesBefore) {
				t.Fatalf("kept partition %+v", g)
			}
		}
	}
	open, sept, oct := files("runs_y2026m11"), files("runs_y2026m09"), files("runs_y2026m10")
	var seen []string
	got, err := p.Compact(ctx, now, func(r plant.Rebuilt) { seen = append(seen, r.Table) })
	if err != nil {
		t.Fatal(err)
	}
	// Four measurements per pass and fail run, one per station fault
	// (simRun): C-S1's run i is a station fault when i%101 == 7.
	meas := func(lo, hi int) int64 {
		var n int64
		for i := lo; i < hi; i++ {
			if i%101 == 7 {
				n++
			} else {
				n += 4
			}
		}
		return n
	}
	check(got, want{"runs_y2026m09", 900, false}, want{"measurements_y2026m09", meas(0, 900), false},
		want{"runs_y2026m10", 1100, false}, want{"measurements_y2026m10", meas(900, 2000), false})
	if strings.Join(seen, " ") != "runs_y2026m09 measurements_y2026m09 runs_y2026m10 measurements_y2026m10" {
		t.Fatalf("reported as done: %v", seen)
	}
	if files("runs_y2026m11") != open || files("runs_y2026m09") == sept || files("runs_y2026m10") == oct {
		t.Fatal("the open month's indexes were rebuilt, or a closed month's were not")
	}

	// Again: nothing to do.
	sept, oct = files("runs_y2026m09"), files("runs_y2026m10")
	got, err = p.Compact(ctx, now, nil)
	if err != nil {
		t.Fatal(err)
	}
	check(got, want{"runs_y2026m09", 900, true}, want{"measurements_y2026m09", meas(0, 900), true},
		want{"runs_y2026m10", 1100, true}, want{"measurements_y2026m10", meas(900, 2000), true})
	if files("runs_y2026m09") != sept || files("runs_y2026m10") != oct {
		t.Fatal("a kept partition was rebuilt")
	}

	// A station offline since early October brings 200 October runs (a
	// tenth of 1,100 is 110): October is rebuilt, September kept.
	forward("C-S3", 200, time.Date(2026, 10, 3, 9, 0, 0, 0, time.UTC), 3)
	got, err = p.Compact(ctx, now, nil)
	if err != nil {
		t.Fatal(err)
	}
	check(got, want{"runs_y2026m09", 900, true}, want{"measurements_y2026m09", meas(0, 900), true},
		want{"runs_y2026m10", 1300, false}, want{"measurements_y2026m10", meas(900, 2000) + meas(0, 200), false})

	// An interrupted rebuild's leftover: an invalid index named as
	// REINDEX CONCURRENTLY names its copies (a unique index that failed on
	// duplicate lots leaves one so). The partition's marker gone, the next
	// compact drops it and rebuilds.
	if err := p.ExecForTest(ctx, `CREATE UNIQUE INDEX CONCURRENTLY runs_y2026m09_lot_idx_ccnew ON runs_y2026m09 (lot)`); err == nil {
		t.Fatal("a unique index on duplicate lots was built")
	}
	if err := p.ExecForTest(ctx, `COMMENT ON TABLE runs_y2026m09 IS NULL`); err != nil {
		t.Fatal(err)
	}
	got, err = p.Compact(ctx, now, nil)
	if err != nil {
		t.Fatal(err)
	}
	if got[0].Table != "runs_y2026m09" || got[0].Kept || len(got[0].Dropped) != 1 || got[0].Dropped[0] != "runs_y2026m09_lot_idx_ccnew" {
		t.Fatalf("after an interrupted rebuild: %+v", got[0])
	}
	var invalid int64
	if err := p.QueryRowForTest(ctx, `SELECT count(*) FROM pg_index WHERE NOT indisvalid AND indrelid = $1::regclass`, &invalid,
		pgx.Identifier{schema, "runs_y2026m09"}.Sanitize()); err != nil || invalid != 0 {
		t.Fatalf("%d invalid indexes left (%v)", invalid, err)
	}

	// One compact at a time per schema.
	other := openPlant(t, url)
	release, err := other.HoldAdvisoryLockForTest(ctx, "plant_compact")
	if err != nil {
		t.Fatal(err)
	}
	if _, err := p.Compact(ctx, now, nil); err == nil || !strings.Contains(err.Error(), "another 'padline plant compact' is running") {
		t.Fatalf("compact beside another: %v", err)
	}
	release()

	// A station's role does not own the tables.
	if _, err := openPlant(t, asRole(url, schema+"_s4")).Compact(ctx, now, nil); err == nil || !strings.Contains(err.Error(), "owner") {
		t.Fatalf("compact as a station's role: %v", err)
	}
}
