package store_test

import (
	"context"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"testing"
	"time"

	"padline/sequences"
	"padline/store"
)

// demoSnapshot is the QM-205 variant file, used as an exact-bytes snapshot.
func demoSnapshot(t testing.TB) []byte {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("..", "testdata", "variants", "QM-205.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// openTemp opens a new shift log in a temporary directory.
func openTemp(t testing.TB) (*store.DB, string) {
	t.Helper()
	path := filepath.Join(t.TempDir(), "shift.db")
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	return db, path
}

// measPerRun is the number of measurements demoRun records.
const measPerRun = 6

// t0 is the demo shift's start.
var t0 = time.Date(2026, 11, 30, 6, 0, 0, 0, time.UTC)

// demoRun is run i of a demo shift of QM-205 (Quillmoor Padworks,
// fictional): six measurements, the trip point among them.
func demoRun(i int, hash string) *sequences.Run {
	started := t0.Add(time.Duration(i) * 4 * time.Second)
	trip := 16.7 + 0.01*float64(i%50)
	verdict, code := sequences.Pass, ""
	if i%17 == 5 {
		verdict, code = sequences.Fail, "trip_high"
	}
	return &sequences.Run{
		Serial:     fmt.Sprintf("QM205-%07d", i),
		Variant:    "QM-205",
		ConfigHash: hash,
		Station:    "L2-S1",
		Fixture:    "FX-07",
		Operator:   "op-3",
		Lot:        fmt.Sprintf("LOT-%d", i/1000),
		Software:   "padline 0.1.0",
		Started:    started,
		Finished:   started.Add(2300 * time.Millisecond),
		Verdict:    verdict,
		FailCode:   sequences.FailCode(code),
		Measurements: []sequences.Measurement{
			{Step: "idle", Name: "latched", Value: 0, Unit: "", Low: 0, High: 0, Verdict: sequences.Pass},
			{Step: "clock", Name: "clock_hz", Value: 465.2, Unit: "Hz", Low: 380, High: 560, Verdict: sequences.Pass},
			{Step: "trip_search", Name: "trip_pf", Value: trip, Unit: "pF", Low: 15.2, High: 18.2, Verdict: verdict},
			{Step: "trip_search", Name: "spread_pf", Value: 0.43, Unit: "pF", Low: math.NaN(), High: 1.0, Verdict: sequences.Pass},
			{Step: "trip_search", Name: "probes", Value: 24, Unit: "", Low: math.NaN(), High: math.NaN(), Verdict: sequences.Pass},
			{Step: "release", Name: "latched_after", Value: 0, Unit: "", Low: 0, High: 0, Verdict: sequences.Pass},
		},
	}
}

// putDemo registers the demo snapshot and returns its hash.
func putDemo(t testing.TB, db *store.DB) string {
	t.Helper()
	h, err := db.PutVariant(context.Background(), "QM-205", demoSnapshot(t))
	if err != nil {
		t.Fatal(err)
	}
	return h
}

// sameFloat treats two NaNs as equal.
func sameFloat(a, b float64) bool {
	return a == b || (math.IsNaN(a) && math.IsNaN(b))
}

// diffRun describes the first difference between a written and a read run.
func diffRun(want, got *sequences.Run) string {
	w, g := *want, *got
	w.Measurements, g.Measurements = nil, nil
	if !w.Started.Equal(g.Started) || !w.Finished.Equal(g.Finished) {
		return fmt.Sprintf("times %v %v, want %v %v", g.Started, g.Finished, w.Started, w.Finished)
	}
	w.Started, w.Finished, g.Started, g.Finished = time.Time{}, time.Time{}, time.Time{}, time.Time{}
	if !reflect.DeepEqual(w, g) {
		return fmt.Sprintf("run %+v, want %+v", g, w)
	}
	if len(want.Measurements) != len(got.Measurements) {
		return fmt.Sprintf("%d measurements, want %d", len(got.Measurements), len(want.Measurements))
	}
	for i, wm := range want.Measurements {
		gm := got.Measurements[i]
		if wm.Step != gm.Step || wm.Name != gm.Name || wm.Unit != gm.Unit || wm.Verdict != gm.Verdict ||
			!sameFloat(wm.Value, gm.Value) || !sameFloat(wm.Low, gm.Low) || !sameFloat(wm.High, gm.High) {
			return fmt.Sprintf("measurement %d: %+v, want %+v", i, gm, wm)
		}
	}
	return ""
}
