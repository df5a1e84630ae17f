package main

import (
	"context"
	"encoding/json"
	"fmt"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"padline/sequences"
	"padline/store"
	"padline/store/driftreport"
)

// TestDriftApprovedBaseline: the complaint — a selection that
// starts just before the step takes its provisional baseline from the
// step itself and underrates it; with a baseline approved over units
// 1–300 the same selection shows the 4 pF step at unit 400 in full.
func TestDriftApprovedBaseline(t *testing.T) {
	if testing.Short() {
		t.Skip("a 700-unit demo shift")
	}
	db := filepath.Join(t.TempDir(), "shift.db")
	if code, _, errOut := runCLI(t, "demo", "--units", "700", "--drift-at", "400", "--drift-pf", "4", "--db", db); code != 0 {
		t.Fatal(errOut)
	}
	s, err := store.Open(db)
	if err != nil {
		t.Fatal(err)
	}
	pts, err := s.TripValues(context.Background(), store.Filter{Variant: "QM-205", Verdict: sequences.Pass}, 0)
	s.Close()
	if err != nil || len(pts) < 600 {
		t.Fatalf("%d points, %v", len(pts), err)
	}
	at := func(i int) string { return pts[i].Finished.Format(time.RFC3339Nano) } // oldest first
	since := at(380)

	prov := driftJSON(t, "drift", "--db", db, "--variant", "QM-205", "--since", since)
	pb := prov.Groups[0].Baseline
	if pb.Kind != "provisional" || !strings.HasPrefix(pb.Text, "the first 50 points, QM205-") {
		t.Errorf("without an approved baseline: %+v", pb)
	}
	if code, out, errOut := runCLI(t, "drift", "baseline", "set", "--db", db, "--variant", "QM-205", "--since", at(0), "--until", at(300),
		"--name", "laminate A", "--approved-by", "qe"); code != 0 || !strings.Contains(out, `approved baseline "laminate A" of QM-205`) {
		t.Fatalf("baseline set: exit %d: %s%s", code, out, errOut)
	}
	// --last-approved approves the window of the latest record again: the
	// same units, so the same centre, σ and n, under the same name.
	var last, again driftreport.BaselineJSON
	if err := json.Unmarshal([]byte(mustCLI(t, "drift", "baseline", "show", "--db", db, "--variant", "QM-205", "--json")), &last); err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal([]byte(mustCLI(t, "drift", "baseline", "set", "--db", db, "--variant", "QM-205", "--last-approved", "--approved-by", "qe2", "--json")), &again); err != nil {
		t.Fatal(err)
	}
	if again.Name != "laminate A" || again.N != last.N || again.Centre != last.Centre || again.Sigma != last.Sigma ||
		!again.Since.Equal(last.Since) || !again.Until.Equal(last.Until) || again.ApprovedBy != "qe2" || !strings.Contains(again.Method, `window of approved baseline "laminate A"`) {
		t.Errorf("--last-approved: %+v, after %+v", again, last)
	}
	if code, _, errOut := runCLI(t, "drift", "baseline", "set", "--db", db, "--variant", "QM-205", "--last-approved", "--since", at(0)); code == 0 || !strings.Contains(errOut, "not both") {
		t.Errorf("--last-approved with --since: exit %d %s", code, errOut)
	}
	if code, _, errOut := runCLI(t, "drift", "baseline", "set", "--db", db, "--variant", "QM-206", "--last-approved"); code == 0 || !strings.Contains(errOut, "no approved limits version and no approved baseline") {
		t.Errorf("--last-approved without a baseline: exit %d %s", code, errOut)
	}
	rep := driftJSON(t, "drift", "--db", db, "--variant", "QM-205", "--since", since)
	g := rep.Groups[0]
	if g.Baseline.Kind != "approved" || g.Baseline.Approved == nil || g.Baseline.Approved.N != 300 || g.Baseline.Approved.Name != "laminate A" {
		t.Fatalf("baseline %+v", g.Baseline)
	}
	if c := g.Charts[0]; float64(c.Target) != g.Baseline.Approved.Centre || float64(c.Sigma) != g.Baseline.Approved.Sigma {
		t.Errorf("chart %+v not on the approved baseline %+v", c, g.Baseline.Approved)
	}
	v := g.Verdict
	if v == nil || !v.Drifting || v.Change == nil || v.Change.Serial < "QM205-000385" || v.Change.Serial > "QM205-000415" || float64(v.ShiftPF) < 2.5 {
		t.Errorf("verdict with the approved baseline: %+v", v)
	}
	if pv := prov.Groups[0].Verdict; pv != nil && pv.Drifting && float64(pv.ShiftPF) >= float64(v.ShiftPF) {
		t.Errorf("the provisional baseline (from the step) should underrate the shift: %v ≥ %v", pv.ShiftPF, v.ShiftPF)
	}
	// --baseline N chooses the provisional window again.
	if own := driftJSON(t, "drift", "--db", db, "--variant", "QM-205", "--since", since, "--baseline", "50"); own.Groups[0].Baseline.Kind != "given" {
		t.Errorf("--baseline 50: %+v", own.Groups[0].Baseline)
	}
	// With limits versions in the log, --last-approved takes the units
	// judged against the one approved last: from its approval on, on its
	// station and fixture.
	s, err = store.Open(db)
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	for i, at := range []int{100, 450} {
		created := pts[at].Finished.Add(-time.Second)
		if _, err := s.AddLimitsVersion(ctx, store.LimitsVersion{Station: "L2-S1", Fixture: "FX-07", Variant: "QM-205", Created: created,
			Cause: fmt.Sprintf("test version %d", i+1), VariantHash: "h", UPF: 0.3, USource: "test", LowPF: 10, HighPF: 60,
			Status: store.LimitsApproved, ApprovedBy: "qe", Decided: created}); err != nil {
			t.Fatal(err)
		}
	}
	s.Close()
	var lv driftreport.BaselineJSON
	if err := json.Unmarshal([]byte(mustCLI(t, "drift", "baseline", "set", "--db", db, "--variant", "QM-205", "--last-approved", "--json")), &lv); err != nil {
		t.Fatal(err)
	}
	if lv.N != len(pts)-450 || !lv.Since.Equal(pts[450].Finished) || !strings.Contains(lv.Method, "window of limits version 2 (L2-S1 / FX-07") {
		t.Errorf("--last-approved with limits versions: %+v; want the %d units from %s", lv, len(pts)-450, pts[450].Finished)
	}
}
