package main

import (
	"context"
	"encoding/json"
	"path/filepath"
	"strings"
	"testing"

	"padline/sequences/demo"
	"padline/store"
)

// 'padline run' on the simulated panel station: refused until a panel
// check passes, then one run per tested site, the x-out logged as not
// tested, a bad panel label refused before anything is tested; history
// and drift --by site read the runs back.
func TestRunPanelStation(t *testing.T) {
	ctx := context.Background()
	db := filepath.Join(t.TempDir(), "shift.db")
	args := []string{"run", "--variant", "QM-205", "--station", "demo-panel", "--db", db}
	if out, _, code := runPadline(t, ctx, "QM205-0001\n", args...); code != exitStationRefused || !strings.Contains(out, "STATION LOCKED") {
		t.Fatalf("unchecked panel station: exit %d\n%s", code, out)
	}
	if out, errs, code := runPadline(t, ctx, "", "station", "check", "--variant", "QM-205", "--station", "demo-panel", "--db", db); code != 0 {
		t.Fatalf("panel check: exit %d\n%s\n%s", code, out, errs)
	}
	out, errs, code := runPadline(t, ctx, "QM205-0001\nQM205-0002 x:3\nQM205-01\nQM205-0003\nQM205-0004\n", args...)
	if code != 0 {
		t.Fatalf("exit %d\nstdout:\n%s\nstderr:\n%s", code, out, errs)
	}
	for _, want := range []string{"panel QM205-0001", "panel QM205-0002", "03 X  x-out", "NOT TESTED  panel serials refused", "4 panel(s) tested"} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}
	s, err := store.Open(db)
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	n := 0
	for e, err := range s.Runs(ctx, store.Filter{Variant: "QM-205"}) {
		if err != nil {
			t.Fatal(err)
		}
		if e.Panel == "" || e.Site < 1 || e.Serial != e.Panel+twoDigits(e.Site) {
			t.Errorf("run %d: serial %s panel %q site %d", e.ID, e.Serial, e.Panel, e.Site)
		}
		n++
	}
	if n != 31 {
		t.Fatalf("%d runs logged, want 8 + 7 + 8 + 8", n)
	}
	// --serial and --xout test one panel; --json gives one object per site.
	js, errs, code := runPadline(t, ctx, "", append(args, "--serial", "QM205-0005", "--xout", "2", "--json")...)
	if code != 0 || strings.Count(js, "\n") != 8 || !strings.Contains(js, `"fail_code":"x_out"`) || !strings.Contains(js, `"site":2`) {
		t.Fatalf("--serial --xout --json: exit %d\n%s\n%s", code, js, errs)
	}
	// Every relay operation of the check and the panels is counted against
	// the ganged fixture's relays.
	if ops, err := s.LoadRelayOps(ctx, "PX-08"); err != nil || len(ops) != 8 || ops[0] == 0 {
		t.Fatalf("relay wear of PX-08: %v, %v", ops, err)
	}
	hist, _, code := runPadline(t, ctx, "", "history", "--db", db, "--panel", "QM205-0002")
	if code != 0 || !strings.Contains(hist, "QM205-000203") || !strings.Contains(hist, "not tested") || strings.Count(hist, "panel QM205-0002 site") != 7 {
		t.Fatalf("history --panel: exit %d\n%s", code, hist)
	}
	dr, errs, code := runPadline(t, ctx, "", "drift", "--db", db, "--variant", "QM-205", "--by", "site", "--json")
	if code != 0 {
		t.Fatalf("drift --by site: exit %d\n%s\n%s", code, dr, errs)
	}
	if !strings.Contains(dr, `"08"`) {
		t.Fatalf("drift --by site has no group for site 08:\n%.600s", dr)
	}
}

func twoDigits(i int) string { return string(rune('0'+i/10)) + string(rune('0'+i%10)) }

// 'padline demo --panel 8' runs a shift of panels and reports the panel
// against one unit, per site.
func TestDemoPanel(t *testing.T) {
	out, errs, code := runPadline(t, context.Background(), "", "demo", "--panel", "8", "--units", "80", "--json")
	if code != 0 {
		t.Fatalf("exit %d\n%s", code, errs)
	}
	lines := strings.Split(strings.TrimSpace(out), "\n")
	if len(lines) != 81 {
		t.Fatalf("%d JSON lines, want 80 sites and a summary", len(lines))
	}
	var sum demo.PanelSummary
	if err := json.Unmarshal([]byte(lines[80]), &sum); err != nil {
		t.Fatal(err)
	}
	if sum.Panels != 10 || sum.Units != 80 || sum.Pass+sum.Fail+sum.StationFault != 80 || len(sum.RMSPerSitePF) != 8 {
		t.Fatalf("summary %+v", sum)
	}
	// A panel of eight takes far less than eight units in a row. The single
	// unit folds its clock, idle and release checks into the search (about
	// 110 ms instead of 187 on the demo station); the panel plan still runs
	// them as separate steps, so the bound is 5, not the 4 it was.
	if !(sum.RatioToSingle > 1 && sum.RatioToSingle < 5) {
		t.Fatalf("panel takes %.2f× one unit", sum.RatioToSingle)
	}
}
