package main

import (
	"bytes"
	"context"
	"encoding/json"
	"path/filepath"
	"strings"
	"testing"

	"padline/store"
)

// runPadline runs one padline command in-process, as main would.
func runPadline(t *testing.T, ctx context.Context, stdin string, args ...string) (stdout, stderr string, code int) {
	t.Helper()
	var out, errb bytes.Buffer
	code = run(ctx, args, strings.NewReader(stdin), &out, &errb)
	return out.String(), errb.String(), code
}

func TestRunSimulatedStation(t *testing.T) {
	db := filepath.Join(t.TempDir(), "shift.db")
	checkStation(t, db) // the station gate wants a passing reference check
	in := "QM205-000001\r\nnot-a-serial\n\nQM205-000002\n"
	out, errs, code := runPadline(t, context.Background(), in,
		"run", "--variant", "QM-205", "--station", "demo-sim", "--db", db, "--operator", "ana", "--lot", "L7")
	if code != 0 {
		t.Fatalf("exit %d\nstdout:\n%s\nstderr:\n%s", code, out, errs)
	}
	var lines []string
	for _, l := range strings.Split(out, "\n") {
		if strings.HasPrefix(l, "QM205-") || strings.HasPrefix(l, "NOT TESTED") {
			lines = append(lines, l)
		}
	}
	if len(lines) != 3 {
		t.Fatalf("want 2 verdicts and 1 refusal, got:\n%s", out)
	}
	if !strings.HasPrefix(lines[0], "QM205-000001   ======== PASS") || !strings.HasPrefix(lines[2], "QM205-000002   ======== PASS") {
		t.Errorf("verdict lines:\n%s", out)
	}
	if !strings.HasPrefix(lines[1], "NOT TESTED  bad serial \"not-a-serial\"") {
		t.Errorf("refusal line: %s", lines[1])
	}
	if !strings.Contains(out, "CAUTION") || !strings.Contains(out, "fixture halted") {
		t.Errorf("the operator's screen lacks the caution or the halt note:\n%s", out)
	}

	// Every verdict shown is in the shift log, with its measurements.
	s, err := store.Open(db)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	for _, serial := range []string{"QM205-000001", "QM205-000002"} {
		es, err := s.RunsBySerial(context.Background(), serial)
		if err != nil || len(es) != 1 {
			t.Fatalf("%s: %d runs, %v", serial, len(es), err)
		}
		e := es[0]
		if e.Verdict != "pass" || e.Operator != "ana" || e.Lot != "L7" || len(e.Measurements) < 5 || e.TripPF < 10 {
			t.Errorf("%s logged as %+v", serial, e.Run)
		}
	}
	if es, _ := s.RunsBySerial(context.Background(), "not-a-serial"); len(es) != 0 {
		t.Error("a refused serial was logged")
	}
}

func TestRunJSONAndStop(t *testing.T) {
	db := filepath.Join(t.TempDir(), "shift.db")
	checkStation(t, db)
	out, errs, code := runPadline(t, context.Background(), "",
		"run", "--variant", "QM-205", "--station", "demo-sim", "--db", db, "--serial", "QM205-000042", "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var u struct {
		Serial  string   `json:"serial"`
		Verdict string   `json:"verdict"`
		TripPF  *float64 `json:"trip_pf"`
	}
	if err := json.Unmarshal([]byte(out), &u); err != nil || u.Serial != "QM205-000042" || u.Verdict != "pass" || u.TripPF == nil {
		t.Fatalf("json %q: %v", out, err)
	}

	// A stop request before the unit starts: nothing is tested or logged,
	// and the command still exits cleanly.
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	_, _, code = runPadline(t, ctx, "QM205-000043\n", "run", "--variant", "QM-205", "--station", "demo-sim", "--db", db)
	if code != 0 {
		t.Errorf("stopped run exits %d", code)
	}
	s, err := store.Open(db)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	if es, _ := s.RunsBySerial(context.Background(), "QM205-000043"); len(es) != 0 {
		t.Error("a unit tested after the stop request was logged")
	}
}

func TestDemoSummaryAndJSON(t *testing.T) {
	out, errs, code := runPadline(t, context.Background(), "", "demo", "--units", "60", "--compare-search")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	for _, want := range []string{"yield", "trip accuracy on good units", "bracketing (bisection / climb)", "staircase", "faster than the climb", "laplace", "search floor on good units"} {
		if !strings.Contains(out, want) {
			t.Errorf("summary lacks %q:\n%s", want, out)
		}
	}
	out, errs, code = runPadline(t, context.Background(), "", "demo", "--units", "20", "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	lines := strings.Split(strings.TrimSpace(out), "\n")
	if len(lines) != 21 {
		t.Fatalf("want 20 unit objects and a summary, got %d lines", len(lines))
	}
	var u map[string]any
	if err := json.Unmarshal([]byte(lines[0]), &u); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"serial", "verdict", "fail_code", "trip_pf", "trip_se_pf", "true_trip_pf", "defects", "probes", "relay_ops", "fixture_ms"} {
		if _, ok := u[k]; !ok {
			t.Errorf("unit object lacks %q: %s", k, lines[0])
		}
	}
	var sum struct {
		Summary bool `json:"summary"`
		Passes  []struct {
			Units int `json:"units"`
		} `json:"passes"`
	}
	if err := json.Unmarshal([]byte(lines[20]), &sum); err != nil || !sum.Summary || len(sum.Passes) != 1 || sum.Passes[0].Units != 20 {
		t.Errorf("summary object %s: %v", lines[20], err)
	}
}
