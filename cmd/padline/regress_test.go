package main

import (
	"context"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"padline/sequences"
	"padline/sequences/session"
	"padline/store"
)

// Regression tests of the bugs found when the station was tried as its
// users would; each failed before its fix.

func TestStationStatusCreatesNoFile(t *testing.T) {
	db := filepath.Join(t.TempDir(), "never.db")
	out, errs, code := runPadline(t, context.Background(), "", "station", "status", "--station", "demo-sim", "--db", db)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	if _, err := os.Stat(db); !os.IsNotExist(err) {
		t.Errorf("station status created %s (%v)", db, err)
	}
	if !strings.Contains(out, "no shift log at "+db) {
		t.Errorf("status does not say there is no log:\n%s", out)
	}
}

func TestRunSaysSimulatedAndRecordsDriver(t *testing.T) {
	db := filepath.Join(t.TempDir(), "shift.db")
	checkStation(t, db)
	out, errs, code := runPadline(t, context.Background(), "QM205-000001\n", "run", "--variant", "QM-205", "--station", "demo-sim", "--db", db)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	if !strings.Contains(out, "SIMULATED station") {
		t.Errorf("banner does not say the station is simulated:\n%s", out)
	}
	s, err := store.Open(db)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	n := 0
	for e, err := range s.Runs(context.Background(), store.Filter{}) {
		if err != nil {
			t.Fatal(err)
		}
		n++
		if e.Driver != "sim" {
			t.Errorf("run %s recorded driver %q, want sim", e.Serial, e.Driver)
		}
	}
	if n != 1 {
		t.Fatalf("%d runs", n)
	}
}

// realLog makes a shift log holding one run of a GPIO station.
func realLog(t *testing.T) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "real.db")
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	raw, err := os.ReadFile(filepath.Join(repo, "testdata/variants/QM-205.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	hash, err := db.PutVariant(ctx, "QM-205", raw)
	if err != nil {
		t.Fatal(err)
	}
	now := time.Now()
	_, err = db.Record(ctx, &sequences.Run{Serial: "QM205-900001", Variant: "QM-205", ConfigHash: hash, Station: "L1-S9", Fixture: "FX-01",
		Software: "test", Started: now.Add(-time.Second), Finished: now, Verdict: sequences.Pass, Driver: "gpio"})
	if err != nil {
		t.Fatal(err)
	}
	return path
}

func TestDemoRefusesRealLogAndHistoryHidesSim(t *testing.T) {
	ctx := context.Background()
	db := realLog(t)
	_, errs, code := runPadline(t, ctx, "", "demo", "--units", "3", "--db", db)
	if code == 0 || !strings.Contains(errs, "real station") {
		t.Fatalf("demo into a real log: exit %d, %s", code, errs)
	}
	if _, errs, code = runPadline(t, ctx, "", "demo", "--units", "3", "--db", db, "--into-real-log"); code != 0 {
		t.Fatalf("demo --into-real-log: exit %d, %s", code, errs)
	}
	out, errs, code := runPadline(t, ctx, "", "history", "--db", db, "--variant", "QM-205", "--format", "csv")
	if code != 0 {
		t.Fatalf("history: exit %d, %s", code, errs)
	}
	if !strings.Contains(out, "QM205-900001") || strings.Contains(out, "QM205-000001") {
		t.Errorf("history of a real log shows simulated runs or hides the real one:\n%s", out)
	}
	out, _, _ = runPadline(t, ctx, "", "history", "--db", db, "--variant", "QM-205", "--format", "csv", "--include-simulated")
	if !strings.Contains(out, "QM205-900001") || !strings.Contains(out, "QM205-000001") {
		t.Errorf("--include-simulated does not show both:\n%s", out)
	}
}

func TestOneConfigurationIsSingular(t *testing.T) {
	db := realLog(t)
	out, errs, code := runPadline(t, context.Background(), "", "history", "--db", db, "--variant", "QM-205", "--limits-history")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	if !strings.Contains(out, "QM-205: 1 configuration\n") {
		t.Errorf("want \"1 configuration\":\n%s", out)
	}
}

// A passed unit scanned again is tested and announced as a repeat; the
// word for a refused scan is not the word for a locked station.
func TestRepeatOfPassedUnitIsNotRefused(t *testing.T) {
	db := filepath.Join(t.TempDir(), "shift.db")
	checkStation(t, db)
	in := "QM205-000001\nQM205-000001\nQM205-000001\n"
	out, errs, code := runPadline(t, context.Background(), in, "run", "--variant", "QM-205", "--station", "demo-sim", "--db", db)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	if strings.Count(out, "======== PASS") != 3 || !strings.Contains(out, "repeat: QM205-000001 passed 2 time(s) before") {
		t.Errorf("repeats of a passed unit:\n%s", out)
	}
	if strings.Contains(out, "NOT TESTED") || strings.Contains(out, "sequences:") {
		t.Errorf("a repeat was refused or shown with a package prefix:\n%s", out)
	}
}

// A corner below 0 pF is said in words, never printed as a capacitance.
func TestLimitsNegativeCornerInWords(t *testing.T) {
	out, errs, code := runPadline(t, context.Background(), "", "limits", "--variant", "QM-212")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	line := ""
	for _, l := range strings.Split(out, "\n") {
		if strings.HasPrefix(l, "trip point") {
			line = l
		}
	}
	if !strings.Contains(line, "below 0 pF (such a unit trips with nothing at the pad)") || strings.Contains(line, "corners -") {
		t.Errorf("corner line: %q", line)
	}
}

// A variant whose worst corner leaves no sampling time (setup max ≥ delay
// min) is accepted; limits says plainly that at that corner the unit cannot
// trip.
func TestLimitsCornerWithoutSamplingTime(t *testing.T) {
	raw, err := os.ReadFile(filepath.Join(repo, "testdata/variants/QM-205.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	s := strings.Replace(string(raw), "setup_ns: {min: 20, typ: 40, max: 80}", "setup_ns: {min: 20, typ: 40, max: 2800}", 1)
	if s == string(raw) {
		t.Fatal("QM-205.yaml's setup_ns line changed: update this test")
	}
	path := filepath.Join(t.TempDir(), "QM-205-slow-setup.yaml")
	if err := os.WriteFile(path, []byte(s), 0o600); err != nil {
		t.Fatal(err)
	}
	out, errs, code := runPadline(t, context.Background(), "", "limits", "--variant", path)
	if code != 0 {
		t.Fatalf("refused: exit %d: %s", code, errs)
	}
	if !strings.Contains(out, "corners the unit cannot trip") {
		t.Errorf("limits does not say the unit cannot trip at a corner:\n%s", out)
	}
}

// The demo's accuracy against the simulator's ground truth, worked out here
// from the per-unit objects: the error spread about the bias meets the
// search target (0.2 pF RMS, DEVELOPERS.md "Benchmarks, studies and
// torture"), the bias is the fixture's stray calibration error (entered
// minus true stray, give or take the rungs' calibration errors, σ 0.05 pF
// each), and the summary reports the same figures.
func TestDemoAccuracyAgainstGroundTruth(t *testing.T) {
	out, errs, code := runPadline(t, context.Background(), "", "demo", "--units", "400", "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	lines := strings.Split(strings.TrimSpace(out), "\n")
	var e []float64
	for _, l := range lines[:len(lines)-1] {
		var u struct {
			Verdict    string   `json:"verdict"`
			TripPF     *float64 `json:"trip_pf"`
			TrueTripPF *float64 `json:"true_trip_pf"`
			Defects    []string `json:"defects"`
		}
		if err := json.Unmarshal([]byte(l), &u); err != nil {
			t.Fatal(err)
		}
		if u.Verdict == "pass" && len(u.Defects) == 0 && u.TripPF != nil && u.TrueTripPF != nil {
			e = append(e, *u.TripPF-*u.TrueTripPF)
		}
	}
	if len(e) < 300 {
		t.Fatalf("%d good units with a trip point", len(e))
	}
	var sum, ss float64
	for _, x := range e {
		sum += x
		ss += x * x
	}
	n := float64(len(e))
	bias := sum / n
	rms := math.Sqrt(ss / n)
	spread := math.Sqrt(math.Max(0, ss/n-bias*bias))
	if spread > 0.2 {
		t.Errorf("error spread about the bias %.3f pF, target ≤ 0.2 pF", spread)
	}
	v, st, err := session.Load("QM-205", "demo-sim")
	if err != nil {
		t.Fatal(err)
	}
	line, err := session.NewSimLine(st, v)
	if err != nil {
		t.Fatal(err)
	}
	var sum2 struct {
		OffsetPF  *float64 `json:"fixture_offset_pf"`
		OffsetUPF *float64 `json:"fixture_offset_u_pf"`
		Passes    []struct {
			RMS    float64 `json:"trip_rms_error_pf"`
			Bias   float64 `json:"trip_bias_pf"`
			Spread float64 `json:"trip_rms_error_less_bias_pf"`
		} `json:"passes"`
	}
	if err := json.Unmarshal([]byte(lines[len(lines)-1]), &sum2); err != nil || len(sum2.Passes) != 1 {
		t.Fatalf("summary: %v", err)
	}
	// The shift-start check's fixture offset corrected every trip point:
	// without it the bias is the stray's calibration error (within the
	// rungs' errors), with it what the offset's uncertainty leaves.
	if sum2.OffsetPF == nil || sum2.OffsetUPF == nil {
		t.Fatal("summary without the fixture offset (demo-sim registers lab trip points)")
	}
	if want := st.Ladder.StrayPF - line.TrueStrayPF(); math.Abs(bias-*sum2.OffsetPF-want) > 0.15 {
		t.Errorf("bias before the offset %+.3f pF, want the stray's calibration error %+.3f pF ± 0.15", bias-*sum2.OffsetPF, want)
	}
	if math.Abs(bias) > 3**sum2.OffsetUPF {
		t.Errorf("bias %+.3f pF after the fixture offset, beyond 3 u = %.3f pF", bias, 3**sum2.OffsetUPF)
	}
	p := sum2.Passes[0]
	t.Logf("%d units: rms %.3f bias %+.3f spread %.3f (summary %.3f %+.3f %.3f)", len(e), rms, bias, spread, p.RMS, p.Bias, p.Spread)
	if math.Abs(p.Bias-bias) > 0.02 || math.Abs(p.Spread-spread) > 0.02 || math.Abs(p.RMS-rms) > 0.02 {
		t.Errorf("summary rms %.3f bias %+.3f spread %.3f, ground truth %.3f %+.3f %.3f", p.RMS, p.Bias, p.Spread, rms, bias, spread)
	}
}
