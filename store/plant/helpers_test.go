package plant_test

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"padline/sequences"
	"padline/store"
	"padline/store/plant"
)

// need skips (or, under PADLINE_REQUIRE_PARTS=1, fails) a test whose
// outside part is missing.
func need(t testing.TB, reason string) {
	t.Helper()
	if os.Getenv("PADLINE_REQUIRE_PARTS") == "1" {
		t.Fatalf("%s", reason)
	}
	t.Skip(reason)
}

// baseURL is the test PostgreSQL server (PADLINE_TEST_PG, else the
// project machines' server at 127.0.0.1:5432, database test).
func baseURL() string {
	if u := os.Getenv("PADLINE_TEST_PG"); u != "" {
		return u
	}
	return "postgres://root@127.0.0.1:5432/test?sslmode=disable"
}

func withParam(url, kv string) string {
	if strings.Contains(url, "?") {
		return url + "&" + kv
	}
	return url + "?" + kv
}

// newSchema creates a schema of its own for the test on the server at
// base, migrates it, and drops it (and the roles the test made) after.
func newSchema(t testing.TB, base string) (url, schema string) {
	t.Helper()
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, base)
	if err != nil {
		need(t, "no PostgreSQL at "+base+": "+err.Error())
	}
	defer conn.Close(ctx)
	schema = fmt.Sprintf("plant_t%d_%d", time.Now().UnixNano()%1e9, rand.IntN(1e6))
	if _, err := conn.Exec(ctx, "CREATE SCHEMA "+schema); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		c, err := pgx.Connect(context.Background(), base)
		if err != nil {
			t.Logf("drop schema %s: %v", schema, err)
			return
		}
		defer c.Close(context.Background())
		if _, err := c.Exec(context.Background(), "DROP SCHEMA "+schema+" CASCADE"); err != nil {
			t.Logf("drop schema %s: %v", schema, err)
		}
		rows, _ := c.Query(context.Background(), "SELECT rolname FROM pg_roles WHERE rolname LIKE $1", schema+"_%")
		roles, _ := pgx.CollectRows(rows, pgx.RowTo[string])
		for _, r := range roles {
			c.Exec(context.Background(), "DROP OWNED BY "+r)
			c.Exec(context.Background(), "DROP ROLE "+r)
		}
	})
	url = withParam(base, "search_path="+schema)
	db, err := plant.Open(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if err := db.Migrate(ctx); err != nil {
		t.Fatal(err)
	}
	return url, schema
}

// openPlant opens url and closes it after the test.
func openPlant(t testing.TB, url string) *plant.DB {
	t.Helper()
	db, err := plant.Open(context.Background(), url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(db.Close)
	return db
}

// asRole is url logged in as role.
func asRole(url, role string) string {
	return strings.Replace(url, "root@", role+"@", 1)
}

// stationLog makes a shift log in dir for station with n runs of a
// simulated shift starting at start, one unit every takt; the trip points
// wander (a random walk on top of noise) so drift has something to find.
func stationLog(t testing.TB, path, station string, n int, start time.Time, seed uint64) *store.DB {
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
	rng := rand.New(rand.NewPCG(seed, 7))
	runs := func(yield func(*sequences.Run) bool) {
		walk := 0.0
		for i := range n {
			walk += 0.01 * rng.NormFloat64()
			trip := 29.7 + walk + 0.3*rng.NormFloat64()
			r := simRun(station, fmt.Sprintf("QM205-%s-%06d", station, i), hash, start.Add(time.Duration(i)*4*time.Second), trip, i%37 == 5, i%101 == 7)
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

// simRun is one run as padline run records it: supply, clock, idle,
// trip search and release, with limits.
func simRun(station, serial, hash string, fin time.Time, trip float64, fail, stationFault bool) *sequences.Run {
	r := &sequences.Run{Serial: serial, Variant: "QM-205", ConfigHash: hash, Station: station, Fixture: "FX-" + station,
		Operator: "op1", Lot: "LOT-" + fin.UTC().Format("0102"), Software: "test", Started: fin.Add(-2 * time.Second),
		Finished: fin, Verdict: sequences.Pass}
	v := sequences.Pass
	if fail {
		v = sequences.Fail
		r.Verdict, r.FailCode = sequences.Fail, "trip_high"
	}
	r.Measurements = []sequences.Measurement{
		{Step: "clock", Name: "freq_hz", Unit: "Hz", Value: 480 + trip, Low: 100, High: 1000, Verdict: sequences.Pass},
		{Step: "idle", Name: "latched", Unit: "", Value: 0, Low: math.NaN(), High: 0, Verdict: sequences.Pass},
		{Step: store.TripStep, Name: store.TripName, Unit: "pF", Value: trip, Low: 25, High: 34, Verdict: v},
		{Step: "trip_search", Name: "spread_pf", Unit: "pF", Value: 0.6, Low: math.NaN(), High: math.NaN(), Verdict: sequences.Pass},
	}
	if stationFault {
		r.Verdict, r.FailCode = sequences.StationFault, "lid_open"
		r.Measurements = r.Measurements[:1]
	}
	return r
}

func tempLog(t testing.TB, name string) string {
	return filepath.Join(t.TempDir(), name+".db")
}
