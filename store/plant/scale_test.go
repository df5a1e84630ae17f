package plant_test

import (
	"context"
	"flag"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"padline/sequences"
	"padline/store"
	"padline/store/drift"
	"padline/store/plant"
)

// The 10,000,000-run figures take many minutes to seed, so they run only
// when asked; the seeded schema is kept for the next run and for timing
// the real binary:
//
//	go test ./store/plant -run TestPlantScale -plant.scale -v -timeout 90m
//	go build -o /tmp/padline ./cmd/padline
//	URL='postgres://root@127.0.0.1:5432/test?sslmode=disable&search_path=plant_scale'
//	time /tmp/padline drift --db "$URL" --variant QM-203 --last 100000 > /dev/null
//	time /tmp/padline drift --db "$URL" --variant QM-203 --by station > /dev/null
//	time /tmp/padline history --db "$URL" --serial SN04321987 > /dev/null
//
// The commands' wall time includes starting the process and a new
// PostgreSQL backend, whose first plan over the month partitions loads
// their catalog entries (about 30 ms at load 15, then under 1 ms).
var (
	plantScale       = flag.Bool("plant.scale", false, "run TestPlantScale: seed 10,000,000 runs (schema plant_scale, kept) and time the plant queries")
	plantScaleSchema = flag.String("plant.scale.schema", "plant_scale", "TestPlantScale's schema (reused when it holds the seed)")
)

func TestPlantScale(t *testing.T) {
	if !*plantScale {
		t.Skip("seeds 10,000,000 runs: run with -plant.scale")
	}
	ctx := context.Background()
	base := baseURL()
	conn, err := pgx.Connect(ctx, base)
	if err != nil {
		need(t, "no PostgreSQL at "+base+": "+err.Error())
	}
	defer conn.Close(ctx)
	schema := *plantScaleSchema
	url := withParam(base, "search_path="+schema)
	var runs int64
	if err := conn.QueryRow(ctx, "SELECT count(*) FROM "+schema+".runs").Scan(&runs); err != nil || runs != 10_000_000 {
		t.Logf("seeding schema %s (found %d runs: %v)", schema, runs, err)
		if _, err := conn.Exec(ctx, "DROP SCHEMA IF EXISTS "+schema+" CASCADE; CREATE SCHEMA "+schema); err != nil {
			t.Fatal(err)
		}
		p := openPlant(t, url)
		if err := p.Migrate(ctx); err != nil {
			t.Fatal(err)
		}
		seed, err := os.ReadFile(filepath.Join("..", "..", "testdata", "plant", "scale", "seed.sql"))
		if err != nil {
			t.Fatal(err)
		}
		start := time.Now()
		if _, err := conn.Exec(ctx, "SET search_path = "+schema+"; "+string(seed)); err != nil {
			t.Fatal(err)
		}
		t.Logf("seeded 10,000,000 runs and 40,000,000 measurements in %v", time.Since(start).Round(time.Second))
	}
	p := openPlant(t, url)
	if err := p.Migrate(ctx); err != nil { // a schema seeded by an older padline
		t.Fatal(err)
	}
	// On a station-fed plant autovacuum marks pages all-visible as runs
	// arrive; a bulk seed must be vacuumed once for index-only scans.
	if _, err := conn.Exec(ctx, "VACUUM (ANALYZE) "+schema+".runs, "+schema+".serial_first, "+schema+".serial_station_first"); err != nil {
		t.Fatal(err)
	}
	best := func(name string, target time.Duration, f func() int) {
		var d time.Duration
		var n int
		for i := range 3 {
			s := time.Now()
			n = f()
			if e := time.Since(s); i == 0 || e < d {
				d = e
			}
		}
		t.Logf("%-58s %8.1f ms (best of 3; %d rows; target ≤ %v)", name, float64(d)/1e6, n, target)
		if d > target {
			t.Errorf("%s took %v, target %v", name, d, target)
		}
	}
	f := store.Filter{Variant: "QM-203", Verdict: sequences.Pass}
	best("drift: last 100,000 trip points of QM-203 + watch + yield", time.Second, func() int {
		pts, err := p.TripValues(ctx, f, 100_000)
		if err != nil {
			t.Fatal(err)
		}
		x := make([]float64, len(pts))
		for i, pt := range pts {
			x[i] = pt.TripPF
		}
		if _, err := drift.WatchSeries(x, drift.FirstN(50), drift.Options{}, drift.DefaultSet); err != nil {
			t.Fatal(err)
		}
		if _, err := p.Counts(ctx, store.Filter{Variant: "QM-203", Since: pts[0].Finished}); err != nil {
			t.Fatal(err)
		}
		return len(pts)
	})
	best("history of one serial (runs + measurements)", 20*time.Millisecond, func() int {
		es, err := p.RunsBySerial(ctx, "SN04321987")
		if err != nil || len(es) != 1 || len(es[0].Measurements) != 4 {
			t.Fatalf("history: %v %d", err, len(es))
		}
		return len(es)
	})
	best("drift --by station: QM-203 trip series, all stations", 3*time.Second, func() int {
		// As drift reads it: streamed into one compact series per station.
		x := map[string][]float64{}
		for pt, err := range p.Trips(ctx, f, true) {
			if err != nil {
				t.Fatal(err)
			}
			x[pt.Station] = append(x[pt.Station], pt.TripPF)
		}
		n := 0
		for _, s := range x {
			n += len(s)
		}
		return n
	})
	_ = plant.SchemaVersion
}
