package plant_test

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"padline/sequences"
	"padline/store"
	"padline/store/plant"
	"padline/store/plant/planttest"
)

// The test server, a schema of the test's own and the skip-or-fail rule
// are planttest's, shared with the other packages' plant tests.
var (
	need      = planttest.Need
	baseURL   = planttest.BaseURL
	withParam = planttest.WithParam
)

// newSchema is a migrated schema of the test's own on base (planttest.Schema).
func newSchema(t testing.TB, base string) (url, schema string) {
	t.Helper()
	return planttest.Schema(t, base, "plant_t")
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
