package store_test

import (
	"bufio"
	"bytes"
	"context"
	"database/sql"
	"encoding/csv"
	"encoding/json"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"padline/sequences"
	"padline/store"
)

func TestHashConfig(t *testing.T) {
	// FIPS 180-2, Appendix B.1: SHA-256("abc").
	const want = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
	if got := store.HashConfig([]byte("abc")); got != want {
		t.Errorf("HashConfig(abc) = %s, want %s", got, want)
	}
}

func TestRoundTrip(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	snap := demoSnapshot(t)
	hash, err := db.PutVariant(ctx, "QM-205", snap)
	if err != nil {
		t.Fatal(err)
	}
	if hash != store.HashConfig(snap) {
		t.Errorf("PutVariant hash %s, want %s", hash, store.HashConfig(snap))
	}
	want := demoRun(5, hash) // a fail, with NaN limits among its measurements
	want.Started = want.Started.In(time.FixedZone("CET", 3600)).Add(123 * time.Nanosecond)
	id, err := db.Record(ctx, want)
	if err != nil {
		t.Fatal(err)
	}
	got, err := db.RunsBySerial(ctx, want.Serial)
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != 1 {
		t.Fatalf("RunsBySerial: %d runs, want 1", len(got))
	}
	if got[0].ID != id {
		t.Errorf("ID %d, want %d", got[0].ID, id)
	}
	if d := diffRun(want, &got[0].Run); d != "" {
		t.Error(d)
	}
	if got[0].TripPF != want.Measurements[2].Value {
		t.Errorf("TripPF %v, want %v", got[0].TripPF, want.Measurements[2].Value)
	}
	back, err := db.Snapshot(ctx, "QM-205", hash)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(back, snap) {
		t.Errorf("snapshot differs: %d bytes back, %d written", len(back), len(snap))
	}
	if _, err := db.Snapshot(ctx, "QM-205", "feed"); !errors.Is(err, store.ErrNotFound) {
		t.Errorf("Snapshot of unknown hash: %v, want ErrNotFound", err)
	}
}

func TestConfigHistory(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	clock := t0
	store.SetNow(db, func() time.Time { clock = clock.Add(time.Hour); return clock })
	a := []byte("limits: {low: 15.2, high: 18.2}\n")
	b := []byte("limits: {low: 15.4, high: 18.2}\n")
	var hashes []string
	for _, snap := range [][]byte{a, a, b, a} {
		h, err := db.PutVariant(ctx, "QM-205", snap)
		if err != nil {
			t.Fatal(err)
		}
		hashes = append(hashes, h)
	}
	if hashes[0] != hashes[1] || hashes[0] != hashes[3] || hashes[0] == hashes[2] {
		t.Errorf("hashes %v: same bytes must give the same hash, different bytes another", hashes)
	}
	hist, err := db.ConfigHistory(ctx, "QM-205")
	if err != nil {
		t.Fatal(err)
	}
	if len(hist) != 2 {
		t.Fatalf("history has %d entries, want 2: %+v", len(hist), hist)
	}
	// a was first seen at the first call (t0+1h), b at the third (t0+3h).
	if hist[0].Hash != hashes[0] || !hist[0].FirstSeen.Equal(t0.Add(time.Hour)) || hist[0].Size != len(a) {
		t.Errorf("history[0] = %+v", hist[0])
	}
	if hist[1].Hash != hashes[2] || !hist[1].FirstSeen.Equal(t0.Add(3*time.Hour)) {
		t.Errorf("history[1] = %+v", hist[1])
	}
	if h, err := db.ConfigHistory(ctx, "QM-999"); err != nil || len(h) != 0 {
		t.Errorf("history of unknown variant: %v, %v", h, err)
	}
}

func TestRecordRefuses(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	hash := putDemo(t, db)
	tests := []struct {
		name  string
		edit  func(r *sequences.Run)
		cause error
	}{
		{"unregistered hash", func(r *sequences.Run) { r.ConfigHash = "0123" }, store.ErrUnknownConfig},
		{"unregistered variant", func(r *sequences.Run) { r.Variant = "QM-212" }, store.ErrUnknownConfig},
		{"empty serial", func(r *sequences.Run) { r.Serial = "" }, store.ErrInvalidRun},
		{"bad verdict", func(r *sequences.Run) { r.Verdict = "maybe" }, store.ErrInvalidRun},
		{"no finish time", func(r *sequences.Run) { r.Finished = time.Time{} }, store.ErrInvalidRun},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			r := demoRun(1, hash)
			tt.edit(r)
			_, err := db.Record(ctx, r)
			if !errors.Is(err, store.ErrNotSaved) || !errors.Is(err, tt.cause) {
				t.Errorf("Record: %v, want ErrNotSaved and %v", err, tt.cause)
			}
			var ns *store.NotSavedError
			if !errors.As(err, &ns) || ns.Serial != r.Serial {
				t.Errorf("Record: %v is not a *NotSavedError for %q", err, r.Serial)
			}
		})
	}
	n, err := store.QueryInt(db, "SELECT count(*) FROM runs")
	if err != nil || n != 0 {
		t.Errorf("runs after refusals: %d, %v; want 0", n, err)
	}
	m, err := store.QueryInt(db, "SELECT count(*) FROM measurements")
	if err != nil || m != 0 {
		t.Errorf("measurements after refusals: %d, %v; want 0", m, err)
	}
}

// seedFilters records a small, hand-countable log: two variants, two
// stations, three lots, every verdict.
func seedFilters(t *testing.T, db *store.DB) {
	t.Helper()
	ctx := context.Background()
	h205 := putDemo(t, db)
	h212, err := db.PutVariant(ctx, "QM-212", []byte("variant: QM-212\n"))
	if err != nil {
		t.Fatal(err)
	}
	type row struct {
		serial, variant, station, lot string
		minute                        int
		verdict                       sequences.Verdict
		trip                          float64 // NaN: no trip measured
	}
	rows := []row{
		{"A1", "QM-205", "L2-S1", "LOT-1", 0, sequences.Fail, 18.9},
		{"A2", "QM-205", "L2-S1", "LOT-1", 1, sequences.Pass, 16.6},
		{"A1", "QM-205", "L2-S1", "LOT-1", 2, sequences.Pass, 16.9},
		{"A3", "QM-205", "L2-S2", "LOT-2", 3, sequences.StationFault, math.NaN()},
		{"A3", "QM-205", "L2-S2", "LOT-2", 4, sequences.Pass, 16.8},
		{"B1", "QM-212", "L2-S2", "LOT-3", 5, sequences.Pass, 22.1},
		{"A4", "QM-205", "L2-S1", "LOT-2", 6, sequences.Fail, math.NaN()},
	}
	for _, r := range rows {
		hash := h205
		if r.variant == "QM-212" {
			hash = h212
		}
		run := demoRun(0, hash)
		run.Serial, run.Variant, run.Station, run.Lot, run.Verdict = r.serial, r.variant, r.station, r.lot, r.verdict
		run.Finished = t0.Add(time.Duration(r.minute) * time.Minute)
		run.Started = run.Finished.Add(-2 * time.Second)
		if math.IsNaN(r.trip) {
			run.Measurements = run.Measurements[:2]
		} else {
			run.Measurements[2].Value = r.trip
		}
		if _, err := db.Record(ctx, run); err != nil {
			t.Fatal(err)
		}
	}
}

func TestRunsFilter(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	seedFilters(t, db)
	tests := []struct {
		name    string
		f       store.Filter
		serials string // in time order
	}{
		{"all", store.Filter{}, "A1 A2 A1 A3 A3 B1 A4"},
		{"serial", store.Filter{Serial: "A1"}, "A1 A1"},
		{"variant", store.Filter{Variant: "QM-212"}, "B1"},
		{"unknown variant", store.Filter{Variant: "QM-999"}, ""},
		{"station", store.Filter{Station: "L2-S2"}, "A3 A3 B1"},
		{"fixture", store.Filter{Fixture: "FX-07"}, "A1 A2 A1 A3 A3 B1 A4"},
		{"lot", store.Filter{Lot: "LOT-2"}, "A3 A3 A4"},
		{"verdict", store.Filter{Verdict: sequences.Fail}, "A1 A4"},
		{"since inclusive", store.Filter{Since: t0.Add(4 * time.Minute)}, "A3 B1 A4"},
		{"until exclusive", store.Filter{Until: t0.Add(2 * time.Minute)}, "A1 A2"},
		{"combined", store.Filter{Variant: "QM-205", Station: "L2-S1", Since: t0.Add(time.Minute)}, "A2 A1 A4"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			var got []string
			for e, err := range db.Runs(ctx, tt.f) {
				if err != nil {
					t.Fatal(err)
				}
				got = append(got, e.Serial)
			}
			if s := strings.Join(got, " "); s != tt.serials {
				t.Errorf("serials %q, want %q", s, tt.serials)
			}
		})
	}
}

func TestRunsStopEarly(t *testing.T) {
	db, _ := openTemp(t)
	seedFilters(t, db)
	n := 0
	for _, err := range db.Runs(context.Background(), store.Filter{}) {
		if err != nil {
			t.Fatal(err)
		}
		n++
		if n == 2 {
			break
		}
	}
	if n != 2 {
		t.Errorf("iterated %d runs, want 2", n)
	}
}

func TestTripSeries(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	seedFilters(t, db)
	tests := []struct {
		name  string
		f     store.Filter
		last  int
		trips []float64
	}{
		// runs without a trip measurement (A3 station fault, A4) are left out
		{"variant", store.Filter{Variant: "QM-205"}, 0, []float64{18.9, 16.6, 16.9, 16.8}},
		{"last 2", store.Filter{Variant: "QM-205"}, 2, []float64{16.9, 16.8}},
		{"station", store.Filter{Variant: "QM-205", Station: "L2-S1"}, 0, []float64{18.9, 16.6, 16.9}},
		{"other variant", store.Filter{Variant: "QM-212"}, 10, []float64{22.1}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			pts, err := db.TripSeries(ctx, tt.f, tt.last)
			if err != nil {
				t.Fatal(err)
			}
			if len(pts) != len(tt.trips) {
				t.Fatalf("%d points, want %d: %+v", len(pts), len(tt.trips), pts)
			}
			for i, p := range pts {
				if p.TripPF != tt.trips[i] {
					t.Errorf("point %d trip %v, want %v", i, p.TripPF, tt.trips[i])
				}
				if i > 0 && p.Finished.Before(pts[i-1].Finished) {
					t.Errorf("point %d out of time order", i)
				}
				if p.Fixture != "FX-07" || p.Station == "" || p.Lot == "" || p.RunID == 0 {
					t.Errorf("point %d lacks context: %+v", i, p)
				}
			}
		})
	}
}

func TestCounts(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	seedFilters(t, db)
	// Hand count of seedFilters: first unit verdicts are A1 fail, A2 pass,
	// A3 pass (its station fault does not count), B1 pass, A4 fail.
	tests := []struct {
		name string
		f    store.Filter
		want store.Counts
	}{
		{"all", store.Filter{}, store.Counts{Runs: 7, Pass: 4, Fail: 2, StationFault: 1, FirstUnits: 5, FirstPass: 3}},
		{"QM-205", store.Filter{Variant: "QM-205"}, store.Counts{Runs: 6, Pass: 3, Fail: 2, StationFault: 1, FirstUnits: 4, FirstPass: 2}},
		// A1's retest pass at minute 2 is not a first run.
		{"from minute 2", store.Filter{Since: t0.Add(2 * time.Minute)}, store.Counts{Runs: 5, Pass: 3, Fail: 1, StationFault: 1, FirstUnits: 3, FirstPass: 2}},
		{"none", store.Filter{Lot: "LOT-9"}, store.Counts{}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, err := db.Counts(ctx, tt.f)
			if err != nil {
				t.Fatal(err)
			}
			if got != tt.want {
				t.Errorf("Counts = %+v, want %+v", got, tt.want)
			}
		})
	}
}

func TestExports(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	hash := putDemo(t, db)
	runs := []*sequences.Run{demoRun(0, hash), demoRun(5, hash), demoRun(9, hash)}
	runs[2].Measurements = nil
	for _, r := range runs {
		if _, err := db.Record(ctx, r); err != nil {
			t.Fatal(err)
		}
	}

	var cbuf bytes.Buffer
	n, err := db.WriteCSV(ctx, &cbuf, store.Filter{Variant: "QM-205"})
	if err != nil || n != 3 {
		t.Fatalf("WriteCSV: %d runs, %v", n, err)
	}
	recs, err := csv.NewReader(&cbuf).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	// header + 6 + 6 + 1 (a run without measurements keeps one row)
	if len(recs) != 1+6+6+1 {
		t.Fatalf("%d CSV rows, want 14", len(recs))
	}
	if strings.Join(recs[0], ",") != strings.Join(store.CSVHeader, ",") {
		t.Errorf("header %v", recs[0])
	}
	col := map[string]int{}
	for i, h := range recs[0] {
		col[h] = i
	}
	spread := recs[4] // run 0, measurement 3: spread_pf with no low limit
	if spread[col["name"]] != "spread_pf" || spread[col["low"]] != "" || spread[col["high"]] != "1" {
		t.Errorf("spread row %v", spread)
	}
	if recs[8][col["fail_code"]] != "trip_high" || recs[8][col["verdict"]] != "fail" {
		t.Errorf("fail row %v", recs[8])
	}
	last := recs[13]
	if last[col["serial"]] != runs[2].Serial || last[col["step"]] != "" || last[col["trip_pf"]] != "" {
		t.Errorf("row of run without measurements %v", last)
	}
	if recs[1][col["finished"]] != runs[0].Finished.Format(time.RFC3339Nano) {
		t.Errorf("finished %q", recs[1][col["finished"]])
	}

	var jbuf bytes.Buffer
	if n, err := db.WriteJSONL(ctx, &jbuf, store.Filter{}); err != nil || n != 3 {
		t.Fatalf("WriteJSONL: %d runs, %v", n, err)
	}
	sc := bufio.NewScanner(&jbuf)
	var lines []store.JSONRun
	for sc.Scan() {
		var j store.JSONRun
		if err := json.Unmarshal(sc.Bytes(), &j); err != nil {
			t.Fatalf("line %q: %v", sc.Text(), err)
		}
		lines = append(lines, j)
	}
	if len(lines) != 3 {
		t.Fatalf("%d JSON lines, want 3", len(lines))
	}
	m := lines[0].Measurements
	if len(m) != 6 || m[3].Low != nil || m[3].High == nil || *m[3].High != 1 || m[4].High != nil {
		t.Errorf("JSON measurements %+v", m)
	}
	if lines[0].TripPF == nil || *lines[0].TripPF != runs[0].Measurements[2].Value {
		t.Errorf("JSON trip_pf %v", lines[0].TripPF)
	}
	if len(lines[2].Measurements) != 0 || lines[2].TripPF != nil {
		t.Errorf("JSON of run without measurements %+v", lines[2])
	}
	if strings.Contains(jbuf.String(), "NaN") {
		t.Errorf("JSON contains NaN")
	}
}

func TestRunsPlanStreams(t *testing.T) {
	db, _ := openTemp(t)
	seedFilters(t, db)
	filters := []store.Filter{{}, {Variant: "QM-205"}, {Serial: "A1"}, {Variant: "QM-205", Since: t0},
		{Station: "L2-S1", Lot: "LOT-1"}, {Variant: "QM-205", Fixture: "FX-07", Verdict: sequences.Fail}}
	for _, stats := range []string{"no statistics", "after ANALYZE"} {
		if stats == "after ANALYZE" {
			if err := store.Exec(db, "ANALYZE"); err != nil {
				t.Fatal(err)
			}
		}
		for _, f := range filters {
			plan, err := store.RunsPlan(db, f)
			if err != nil {
				t.Fatal(err)
			}
			// A sorter over the whole result would hold it in memory or a
			// temp file before the first row (SQLite docs, "EXPLAIN QUERY
			// PLAN", §1.2 "Temporary Sorting B-Trees").
			if strings.Contains(plan, "TEMP B-TREE FOR ORDER BY") {
				t.Errorf("%s: filter %+v sorts the whole result:\n%s", stats, f, plan)
			}
		}
	}
}

func TestRelayOps(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	got, err := db.LoadRelayOps(ctx, "FX-07")
	if err != nil || got != nil {
		t.Fatalf("LoadRelayOps of new fixture: %v, %v", got, err)
	}
	want := []uint64{10, 0, 3, 1 << 40, 5, 6, 7, 8}
	if err := db.SaveRelayOps(ctx, "FX-07", want); err != nil {
		t.Fatal(err)
	}
	if err := db.SaveRelayOps(ctx, "FX-08", []uint64{1}); err != nil {
		t.Fatal(err)
	}
	got, err = db.LoadRelayOps(ctx, "FX-07")
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != len(want) {
		t.Fatalf("LoadRelayOps = %v, want %v", got, want)
	}
	for i := range want {
		if got[i] != want[i] {
			t.Errorf("rung %d: %d, want %d", i, got[i], want[i])
		}
	}
	if err := db.SaveRelayOps(ctx, "FX-07", []uint64{math.MaxUint64}); err == nil {
		t.Error("SaveRelayOps accepted a count beyond int64")
	}
}

func TestMigrations(t *testing.T) {
	ctx := context.Background()
	if store.SchemaVersion() < 2 {
		t.Fatalf("SchemaVersion %d: the upgrade path needs at least 2 migrations", store.SchemaVersion())
	}

	t.Run("upgrade from version 1", func(t *testing.T) {
		path := filepath.Join(t.TempDir(), "old.db")
		old, err := store.OpenVersion(path, 1)
		if err != nil {
			t.Fatal(err)
		}
		hash := putDemo(t, old)
		if _, err := old.Record(ctx, demoRun(1, hash)); err != nil {
			t.Fatal(err)
		}
		if v, _ := old.Version(ctx); v != 1 {
			t.Fatalf("old file at version %d, want 1", v)
		}
		if err := old.SaveRelayOps(ctx, "FX-07", []uint64{1}); err == nil {
			t.Fatal("relay_ops exists at version 1; the upgrade test would prove nothing")
		}
		old.Close()

		db, err := store.Open(path)
		if err != nil {
			t.Fatal(err)
		}
		defer db.Close()
		if v, _ := db.Version(ctx); v != store.SchemaVersion() {
			t.Errorf("upgraded to version %d, want %d", v, store.SchemaVersion())
		}
		if runs, err := db.RunsBySerial(ctx, demoRun(1, hash).Serial); err != nil || len(runs) != 1 {
			t.Errorf("run from version 1: %v, %v", runs, err)
		}
		if err := db.SaveRelayOps(ctx, "FX-07", []uint64{1}); err != nil {
			t.Errorf("relay ops after upgrade: %v", err)
		}
	})

	t.Run("newer schema refused", func(t *testing.T) {
		db, path := openTemp(t)
		newer := store.SchemaVersion() + 1
		if err := store.Exec(db, "PRAGMA user_version = "+itoa(newer)); err != nil {
			t.Fatal(err)
		}
		db.Close()
		_, err := store.Open(path)
		if !errors.Is(err, store.ErrSchemaTooNew) {
			t.Fatalf("Open: %v, want ErrSchemaTooNew", err)
		}
		for _, v := range []string{itoa(newer), itoa(store.SchemaVersion())} {
			if !strings.Contains(err.Error(), v) {
				t.Errorf("error %q does not name version %s", err, v)
			}
		}
	})

	t.Run("foreign sqlite file refused", func(t *testing.T) {
		path := filepath.Join(t.TempDir(), "other.db")
		other, err := sql.Open("sqlite3", path)
		if err != nil {
			t.Fatal(err)
		}
		if _, err := other.Exec("CREATE TABLE inventory (part TEXT)"); err != nil {
			t.Fatal(err)
		}
		other.Close()
		before, _ := os.ReadFile(path)
		_, err = store.Open(path)
		if !errors.Is(err, store.ErrNotShiftLog) {
			t.Fatalf("Open: %v, want ErrNotShiftLog", err)
		}
		after, _ := os.ReadFile(path)
		if !bytes.Equal(before, after) {
			t.Error("Open modified a file it refused")
		}
	})

	t.Run("non-sqlite file refused", func(t *testing.T) {
		path := filepath.Join(t.TempDir(), "notes.txt")
		junk := bytes.Repeat([]byte("station L2-S1 shift notes\n"), 200)
		if err := os.WriteFile(path, junk, 0o644); err != nil {
			t.Fatal(err)
		}
		if _, err := store.Open(path); !errors.Is(err, store.ErrNotShiftLog) {
			t.Fatalf("Open: %v, want ErrNotShiftLog", err)
		}
		if after, _ := os.ReadFile(path); !bytes.Equal(after, junk) {
			t.Error("Open modified a file it refused")
		}
	})

	t.Run("empty file initialised", func(t *testing.T) {
		path := filepath.Join(t.TempDir(), "empty.db")
		if err := os.WriteFile(path, nil, 0o644); err != nil {
			t.Fatal(err)
		}
		db, err := store.Open(path)
		if err != nil {
			t.Fatal(err)
		}
		defer db.Close()
		if id, err := store.QueryInt(db, "PRAGMA application_id"); err != nil || id != store.ApplicationID {
			t.Errorf("application_id %#x, %v", id, err)
		}
		if mode, err := store.QueryText(db, "PRAGMA journal_mode"); err != nil || mode != "wal" {
			t.Errorf("journal_mode %q, %v", mode, err)
		}
		// synchronous FULL is 2 (SQLite docs, "PRAGMA synchronous").
		if s, err := store.QueryInt(db, "PRAGMA synchronous"); err != nil || s != 2 {
			t.Errorf("synchronous %d, %v; want 2", s, err)
		}
		if fk, err := store.QueryInt(db, "PRAGMA foreign_keys"); err != nil || fk != 1 {
			t.Errorf("foreign_keys %d, %v; want 1", fk, err)
		}
	})

	t.Run("reopen is idempotent", func(t *testing.T) {
		db, path := openTemp(t)
		hash := putDemo(t, db)
		if _, err := db.Record(ctx, demoRun(2, hash)); err != nil {
			t.Fatal(err)
		}
		db.Close()
		again, err := store.Open(path)
		if err != nil {
			t.Fatal(err)
		}
		defer again.Close()
		if n, _ := store.QueryInt(again, "SELECT count(*) FROM runs"); n != 1 {
			t.Errorf("%d runs after reopen, want 1", n)
		}
	})
}

func itoa(n int) string { return strconv.Itoa(n) }
