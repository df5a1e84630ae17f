package plant_test

import (
	"bytes"
	"context"
	"fmt"
	"reflect"
	"strconv"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"padline/sequences"
	"padline/store"
	"padline/store/history"
	"padline/store/plant"
)

// panelLog makes a shift log for station with n runs from start, one every
// 4 s: panels of 8 sites (label PNL-<station>-<k>, site 1..8) and, after
// every third panel, two units tested alone (no panel, site 0), as a line
// that tests both ways records them (README "Panels").
func panelLog(t testing.TB, path, station string, n int, start time.Time) *store.DB {
	t.Helper()
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	ctx := context.Background()
	hash, err := db.PutVariant(ctx, "QM-205", []byte("name: QM-205\n# demo variant of the tests\n"))
	if err != nil {
		t.Fatal(err)
	}
	runs := func(yield func(*sequences.Run) bool) {
		// Cycles of 26 runs: three panels of 8 sites, then two units alone.
		for i := range n {
			fin := start.Add(time.Duration(i) * 4 * time.Second)
			k, cycle := i%26, i/26
			if k >= 24 {
				if !yield(simRun(station, fmt.Sprintf("QM205-%s-U%06d", station, i), hash, fin, 29.6, i%37 == 5, false)) {
					return
				}
				continue
			}
			panel, site := 3*cycle+k/8, k%8+1
			r := simRun(station, fmt.Sprintf("QM205-%s-P%05d-%02d", station, panel, site), hash, fin, 29.7, i%37 == 5, i%101 == 7)
			r.Panel, r.Site = fmt.Sprintf("PNL-%s-%05d", station, panel), site
			if !yield(r) {
				return
			}
		}
	}
	if _, err := db.Import(ctx, runs, 500); err != nil {
		t.Fatal(err)
	}
	return db
}

// A run's panel label and site reach the plant as the shift log holds them,
// on every write path: small batches sent as arrays in one round trip, a
// batch of more than 200 runs staged by COPY, and a catch-up of 2,000 runs
// or more sent as two halves (each by COPY), all as the station's own role.
// The plant then answers as the shift log does: runs by panel, by panel and
// site, of units tested alone, by serial and in a short window (the two
// ways Runs reads), the runs behind drift alarms (RunsAt), trip series and
// counts under a panel filter, and `padline history`'s table, JSON lines
// and CSV, byte for byte.
func TestPanelForwardedOnEveryPath(t *testing.T) {
	url, schema := newSchema(t, baseURL())
	ctx := context.Background()
	admin := openPlant(t, url)
	start := time.Date(2026, 12, 1, 6, 0, 0, 0, time.UTC)
	paths := []struct {
		station string
		runs    int
		batch   int // Forwarder.BatchSize: 0 is its default (5,000)
	}{
		{"P-SMALL", 130, 40},  // batches of ≤ 200 runs: arrays (putSmall)
		{"P-COPY", 450, 450},  // one batch of 450: staged by COPY
		{"P-HALVES", 2400, 0}, // one batch of 2,400: two halves of 1,200, each by COPY
	}
	logs := map[string]*store.DB{}
	files := map[string]string{}
	for i, c := range paths {
		role := schema + "_" + strconv.Itoa(i)
		register(t, admin, plant.Station{Name: c.station, Line: "LP", Role: role})
		files[c.station] = tempLog(t, c.station)
		// Each station a millisecond after the one before: RunsAt finds
		// runs by id and time over every station.
		log := panelLog(t, files[c.station], c.station, c.runs, start.Add(time.Duration(i)*time.Millisecond))
		logs[c.station] = log
		p := openPlant(t, asRole(url, role))
		f := forwarder(log, p, c.station)
		f.BatchSize = c.batch
		var batches, biggest int
		f.OnBatch = func(r plant.Result) {
			batches++
			biggest = max(biggest, r.RunsLanded)
			if len(r.Refused) > 0 {
				t.Errorf("%s: refused %+v", c.station, r.Refused)
			}
		}
		if err := f.Drain(ctx); err != nil {
			t.Fatal(err)
		}
		want := c.batch
		if want == 0 {
			want = c.runs
		}
		if biggest != min(want, c.runs) {
			t.Fatalf("%s: largest batch landed %d runs, want %d (the path under test was not taken)", c.station, biggest, min(want, c.runs))
		}
	}

	// Each run's panel and site as stored, against the shift log's.
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	for _, c := range paths {
		local := entries(t, logs[c.station].Runs(ctx, store.Filter{}))
		var panels, alone int
		for _, e := range local {
			if e.Panel != "" {
				panels++
			} else {
				alone++
			}
		}
		if len(local) != c.runs || panels == 0 || alone == 0 {
			t.Fatalf("%s: shift log holds %d runs, %d on panels and %d alone", c.station, len(local), panels, alone)
		}
		stored := map[int64][2]string{}
		rows, err := conn.Query(ctx, `SELECT r.local_id, r.panel, r.site FROM runs r JOIN stations s ON s.id = r.station_id
			WHERE s.name = $1`, c.station)
		if err != nil {
			t.Fatal(err)
		}
		var (
			id          int64
			panel, site string
		)
		if _, err := pgx.ForEachRow(rows, []any{&id, &panel, &site}, func() error {
			if _, dup := stored[id]; dup {
				return fmt.Errorf("run %d stored twice", id)
			}
			stored[id] = [2]string{panel, site}
			return nil
		}); err != nil {
			t.Fatalf("%s: %v", c.station, err)
		}
		if len(stored) != c.runs {
			t.Fatalf("%s: plant holds %d runs, the shift log %d", c.station, len(stored), c.runs)
		}
		for _, e := range local {
			want := [2]string{e.Panel, ""}
			if e.Site > 0 {
				want[1] = strconv.Itoa(e.Site)
			}
			if got, ok := stored[e.ID]; !ok || got != want {
				t.Fatalf("%s run %d: plant keeps panel %q site %q, the shift log %q site %d", c.station, e.ID, stored[e.ID][0], stored[e.ID][1], e.Panel, e.Site)
			}
		}
	}

	// The plant's reads against the shift log's.
	for _, c := range paths {
		st, log := c.station, logs[c.station]
		panel := fmt.Sprintf("PNL-%s-%05d", st, 4)
		filters := []store.Filter{
			{Station: st},
			{Panel: panel},
			{Station: st, Panel: panel, Site: 3},
			{Station: st, Site: 5},
			{Station: st, Site: -1},
			{Station: st, Variant: "QM-205", Panel: panel, Verdict: sequences.Pass},
			{Serial: fmt.Sprintf("QM205-%s-P%05d-%02d", st, 2, 7)},
			{Station: st, Since: start.Add(100 * time.Second), Until: start.Add(140 * time.Second)}, // a short window: fewRuns
		}
		for _, f := range filters {
			a, b := entries(t, log.Runs(ctx, f)), entries(t, admin.Runs(ctx, f))
			if len(a) == 0 {
				t.Fatalf("%s: no runs in the shift log for %+v", st, f)
			}
			if d := sameEntries(a, b); d != "" {
				t.Fatalf("%s runs %+v differ: %s", st, f, d)
			}
			if f.Panel != "" && (a[0].Panel != f.Panel || b[0].Panel != f.Panel) {
				t.Fatalf("%s: runs of panel %s read as panel %q / %q", st, f.Panel, a[0].Panel, b[0].Panel)
			}
			ta, err := log.TripSeries(ctx, f, 0)
			if err != nil {
				t.Fatal(err)
			}
			tb, err := admin.TripSeries(ctx, f, 0)
			if err != nil {
				t.Fatal(err)
			}
			for i := range tb {
				tb[i].Line = "" // the shift log knows no lines
			}
			if !reflect.DeepEqual(ta, tb) {
				t.Fatalf("%s trip series %+v differ: %d vs %d points", st, f, len(ta), len(tb))
			}
			ca, err := log.Counts(ctx, f)
			if err != nil {
				t.Fatal(err)
			}
			cb, err := admin.Counts(ctx, f)
			if err != nil {
				t.Fatal(err)
			}
			if ca != cb {
				t.Fatalf("%s counts %+v: log %+v plant %+v", st, f, ca, cb)
			}
		}
		// The runs behind drift alarms, by id and time: panel runs and a
		// unit tested alone.
		all := entries(t, log.Runs(ctx, store.Filter{Station: st}))
		var ids []int64
		var ats []time.Time
		var want []store.Entry
		for _, i := range []int{0, 7, 8, 24, 25, 26, len(all) - 1} {
			e := all[i]
			ids, ats = append(ids, e.ID), append(ats, e.Finished)
			w := log.RunAt(ctx, "QM-205", e.ID, e.Finished)
			w.Measurements = nil // RunsAt reads no measurements
			want = append(want, w)
		}
		got, err := admin.RunsAt(ctx, "QM-205", ids, ats)
		if err != nil {
			t.Fatal(err)
		}
		if d := sameEntries(ptrs(want), ptrs(got)); d != "" {
			t.Fatalf("%s runs at: %s", st, d)
		}
		// padline history on the shift log and on the plant.
		for _, o := range []history.Options{
			{Filter: store.Filter{Station: st, Panel: panel}, Format: "table"},
			{Filter: store.Filter{Station: st, Variant: "QM-205"}, Format: "table"},
			{Filter: store.Filter{Serial: fmt.Sprintf("QM205-%s-P%05d-%02d", st, 2, 7)}, Format: "table"},
			{Filter: store.Filter{Station: st, Panel: panel}, Format: "json"},
			{Filter: store.Filter{Station: st, Variant: "QM-205"}, Format: "csv", Per: "measurement"},
		} {
			var a, b bytes.Buffer
			o.DB = files[st]
			if err := history.Write(ctx, &a, o); err != nil {
				t.Fatal(err)
			}
			o.DB = url
			if err := history.Write(ctx, &b, o); err != nil {
				t.Fatal(err)
			}
			if a.String() != b.String() {
				t.Fatalf("%s: history %s %+v differs:\nshift log:\n%.2000s\nplant:\n%.2000s", st, o.Format, o.Filter, a.String(), b.String())
			}
			if o.Filter.Panel != "" && !bytes.Contains(a.Bytes(), []byte(panel)) {
				t.Fatalf("%s: history %s of panel %s does not name it:\n%s", st, o.Format, panel, a.String())
			}
		}
	}
}

func ptrs(es []store.Entry) []*store.Entry {
	out := make([]*store.Entry, len(es))
	for i := range es {
		out[i] = &es[i]
	}
	return out
}
