package main

import (
	"bytes"
	"context"
	"encoding/json"
	"flag"
	"fmt"
	"iter"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"padline/sequences"
	"padline/sequences/demo"
	"padline/store"
	"padline/store/driftreport"
)

// The 1,000,000-run figure takes a minute to seed, so it runs only when
// asked (store/scale_test.go's pattern):
//
//	go test ./cmd/padline -run TestDriftScale -drift.scale -v -timeout 30m [-drift.scale.db /tmp/drift-1m.db]
//
// and then, for time and peak memory of the real binary:
//
//	go build -o /tmp/padline ./cmd/padline
//	/usr/bin/time -v /tmp/padline drift --db /tmp/drift-1m.db --variant QM-205
var (
	driftScale     = flag.Bool("drift.scale", false, "run TestDriftScale: seed 1,000,000 runs of one variant and time 'padline drift'")
	driftScaleRuns = flag.Int("drift.scale.runs", 1_000_000, "runs TestDriftScale seeds")
	driftScaleDB   = flag.String("drift.scale.db", "", "TestDriftScale: keep the seeded log at this path and reuse it when it exists")
)

// driftJSON runs padline with args (plus --json) and decodes the report.
func driftJSON(t *testing.T, args ...string) driftreport.Report {
	t.Helper()
	code, out, errOut := runCLI(t, append(args, "--json")...)
	if code != 0 {
		t.Fatalf("padline %s: exit %d: %s", strings.Join(args, " "), code, errOut)
	}
	var rep driftreport.Report // null numbers decode as 0
	if err := json.Unmarshal([]byte(out), &rep); err != nil {
		t.Fatalf("decode %q: %v", out, err)
	}
	return rep
}

// writeFile writes content to name in a fresh temporary directory.
func writeFile(t *testing.T, name, content string) string {
	t.Helper()
	p := filepath.Join(t.TempDir(), name)
	if err := os.WriteFile(p, []byte(content), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// TestDriftCSV: a series built to trip exactly one rule at a known point.
// With target 0 and σ 1 given, point 21 at +3.5 is the first beyond the 3σ
// limit (Western Electric rule 1; the limit is the definition of the
// Shewhart chart, no source needed) and nothing fires earlier.
func TestDriftCSV(t *testing.T) {
	var b strings.Builder
	b.WriteString("serial,trip_pf\n")
	for i := range 30 {
		v := 0.5 * float64(i%2*2-1) // alternating ±0.5: inside 1σ, no run
		if i == 20 {
			v = 3.5
		}
		fmt.Fprintf(&b, "S%02d,%g\n", i+1, v)
	}
	path := writeFile(t, "bench.csv", b.String())
	rep := driftJSON(t, "drift", "--csv", path, "--column", "trip_pf", "--chart", "imr", "--rules", "limits",
		"--target", "0", "--sigma", "1", "--lsl", "-6", "--usl", "6")
	if len(rep.Groups) != 1 {
		t.Fatalf("%d groups", len(rep.Groups))
	}
	g := rep.Groups[0]
	if g.Points != 30 || g.Baseline.FirstUnit != 1 || g.Baseline.LastUnit != 30 {
		t.Errorf("points %d, baseline %+v", g.Points, g.Baseline)
	}
	if len(g.Alarms) == 0 {
		t.Fatal("no alarm")
	}
	a := g.Alarms[0]
	if a.Seq != 1 || a.Chart != "individuals" || a.Rule != "we1" || a.Unit != 21 {
		t.Errorf("first alarm %+v, want #1 individuals we1 at unit 21", a)
	}
	c := g.Charts[0]
	if c.Center != 0 || c.Upper != 3 || c.Lower != -3 {
		t.Errorf("individuals centre %v limits %v … %v, want 0, ±3", c.Center, c.Lower, c.Upper)
	}
	if g.Capability == nil || g.Capability.N != 30 {
		t.Fatalf("capability %+v (%s)", g.Capability, g.CapabilityNote)
	}
	// Cp = (USL − LSL)/6σ_within with σ_within = MR̄/d2 of the data, not the
	// --sigma given for the chart (NIST/SEMATECH e-Handbook §6.1.6).
	if cp := float64(g.Capability.Cp); !(cp > 0) || math.IsInf(cp, 0) {
		t.Errorf("Cp %v", cp)
	}
	if g.Yield != nil {
		t.Errorf("yield from a CSV: %+v", g.Yield)
	}

	// The text report numbers the same alarm and names the baseline.
	code, out, errOut := runCLI(t, "drift", "--csv", path, "--column", "trip_pf", "--chart", "imr", "--rules", "limits",
		"--target", "0", "--sigma", "1", "--baseline", "20")
	if code != 0 {
		t.Fatal(errOut)
	}
	for _, want := range []string{"baseline         units 1–20 (20 points)", "     1  point 21        -                    individuals  we1",
		"verdict          trip_pf rose 0.4 (0.4 σ) from point 21 (Individuals (1 point beyond 3σ) signalled at point 21)", "capability       not computed: no limits"} {
		if !strings.Contains(out, want) {
			t.Errorf("report lacks %q:\n%s", want, out)
		}
	}

	// A bad row is named by file, line and column.
	bad := writeFile(t, "bad.csv", "trip_pf\n1\n2\nx\n")
	code, _, errOut = runCLI(t, "drift", "--csv", bad, "--column", "trip_pf")
	if want := bad + `: line 4, column "trip_pf": "x" is not a finite number`; code == 0 || !strings.Contains(errOut, want) {
		t.Errorf("exit %d, stderr %q, want %q", code, errOut, want)
	}
}

func TestDriftErrors(t *testing.T) {
	csvPath := writeFile(t, "s.csv", "v\n1\n2\n3\n")
	for _, tc := range []struct {
		args []string
		want string
	}{
		{[]string{"drift"}, "give --variant V, or --csv FILE --column NAME"},
		{[]string{"drift", "--csv", csvPath}, "--csv needs --column"},
		{[]string{"drift", "--variant", "QM-205", "--column", "v"}, "--column goes with --csv"},
		{[]string{"drift", "--variant", "QM-205", "--chart", "pareto"}, "--chart must be"},
		{[]string{"drift", "--variant", "QM-205", "--by", "operator"}, "--by must be"},
		{[]string{"drift", "--variant", "QM-205", "--chart", "xbar-r", "--subgroup", "11"}, "--subgroup must be 2…10"},
		{[]string{"drift", "--variant", "QM-205", "--rules", "mine"}, "--rules must be"},
		{[]string{"drift", "--variant", "QM-205", "--baseline", "1"}, "--baseline must be at least 2"},
		{[]string{"drift", "--variant", "QM-205", "--sigma", "-1"}, "--sigma must be a positive number"},
		{[]string{"drift", "--variant", "QM-205", "--lambda", "1.5"}, "--lambda must be in (0, 1]"},
		{[]string{"drift", "--variant", "QM-205", "--x", "hour"}, "--x must be time, serial or point"},
		{[]string{"drift", "--variant", "QM-205", "--since", "yesterday"}, "--since"},
		{[]string{"drift", "--variant", "QM-205", "--db", filepath.Join(t.TempDir(), "none.db")}, "no shift log at"},
		{[]string{"drift", "--csv", csvPath, "--column", "v", "--by", "lot"}, "--by works on the shift log"},
		{[]string{"drift", "--csv", csvPath, "--column", "v", "--lsl", "5", "--usl", "1"}, "--lsl 5 must be below --usl 1"},
		{[]string{"drift", "study", "--runs", "0"}, "--runs must be ≥ 1"},
		{[]string{"demo", "--drift-pf", "4"}, "--drift-pf needs --drift-at"},
		{[]string{"demo", "--drift-at", "1", "--drift-pf", "4"}, "at least 2"},
		{[]string{"demo", "--units", "10", "--drift-at", "20"}, "past the shift's 10 units"},
		{[]string{"demo", "--units", "10", "--drift-at", "5", "--drift-pf", "7.5"}, "the pad cannot lose more than it has"},
	} {
		code, _, errOut := runCLI(t, tc.args...)
		if code == 0 || !strings.Contains(errOut, tc.want) {
			t.Errorf("padline %s: exit %d, stderr %q, want %q", strings.Join(tc.args, " "), code, errOut, tc.want)
		}
	}
}

// demoJSONSummary runs the demo in-process and returns its summary object.
func demoJSONSummary(t *testing.T, args ...string) demo.Summary {
	t.Helper()
	code, out, errOut := runCLI(t, append([]string{"demo", "--json"}, args...)...)
	if code != 0 {
		t.Fatalf("demo: exit %d: %s", code, errOut)
	}
	lines := strings.Split(strings.TrimSpace(out), "\n")
	var s demo.Summary
	if err := json.Unmarshal([]byte(lines[len(lines)-1]), &s); err != nil {
		t.Fatal(err)
	}
	return s
}

// TestDemoDrift: a 1σ step (4 pF; the QM-205 Monte Carlo trip σ is 4.2 pF,
// 'padline limits --variant QM-205') at unit 150 of 300 is flagged after
// unit 150 within a few dozen units (the drift package's study: median 9,
// 90 % within about 20 points for the default set with a 50-point
// baseline), and the log the demo leaves shows it to 'padline drift'.
func TestDemoDrift(t *testing.T) {
	db := filepath.Join(t.TempDir(), "shift.db")
	s := demoJSONSummary(t, "--units", "300", "--drift-at", "150", "--drift-pf", "4", "--db", db)
	d := s.Drift
	if d == nil {
		t.Fatal("no drift in the summary")
	}
	if d.StepAtUnit != 150 || d.StepPF != 4 {
		t.Errorf("drift %+v", d)
	}
	// The baseline is the first 50 passed units, as 'padline drift' takes
	// them: units 1–50 and the few more that make up for failed units
	// (defect rates ≤ 1 % each, DEVELOPERS.md "Simulator realism floor").
	var last, n int
	if _, err := fmt.Sscanf(d.Baseline, "units 1–%d (the first %d passed units)", &last, &n); err != nil || n != 50 || last < 50 || last > 60 || d.BaselineUnits != [2]int{1, last} {
		t.Errorf("baseline %q %v", d.Baseline, d.BaselineUnits)
	}
	// σ of the good units' trip points: the timing model's Monte Carlo
	// spread (4.2 pF) within what 50 points can tell (±25 %).
	if d.SigmaPF < 3 || d.SigmaPF > 5.5 {
		t.Errorf("σ %.2f pF", d.SigmaPF)
	}
	f := d.First
	if f == nil {
		t.Fatal("no alarm after the step")
	}
	if f.Unit < 150 || f.LagUnits != f.Unit-149 || f.LagUnits > 48 || f.LagGoodUnits > f.LagUnits {
		t.Errorf("first alarm %+v: want at unit 150…197, lag = unit − 149", f)
	}
	if f.Serial != fmt.Sprintf("QM205-%06d", f.Unit) || f.Chart == "" || f.Rule == "" {
		t.Errorf("first alarm %+v", f)
	}

	// Without drift flags the summary has no drift object.
	if s := demoJSONSummary(t, "--units", "20"); s.Drift != nil {
		t.Errorf("drift without flags: %+v", s.Drift)
	}

	// The text summary states the same alarm.
	code, out, errOut := runCLI(t, "demo", "--units", "300", "--drift-at", "150", "--drift-pf", "4")
	if code != 0 {
		t.Fatal(errOut)
	}
	want := fmt.Sprintf("first alarm    #%d %s %s (%s) at %s (unit %d): lag %d units from unit 150", f.Seq, f.Chart, f.Rule, f.Description, f.Serial, f.Unit, f.LagUnits)
	if !strings.Contains(out, want) || !strings.Contains(out, "verdict          trip point of QM-205 rose ") {
		t.Errorf("summary lacks %q or the verdict:\n%s", want, out)
	}

	// 'padline drift' over the demo's log sees the step too, and says it
	// in the same words: one series, one numbering (serial and time).
	svg := filepath.Join(t.TempDir(), "drift.svg")
	rep := driftJSON(t, "drift", "--db", db, "--variant", "QM-205", "--svg", svg)
	if rep.Variant != "QM-205" || len(rep.Groups) != 1 {
		t.Fatalf("report %+v", rep)
	}
	g := rep.Groups[0]
	if rep.Verdict != d.Verdict || g.Verdict == nil || g.Verdict.Text != d.Verdict || g.AlarmCount != d.Alarms {
		t.Errorf("drift says %q (%d alarms), the demo %q (%d alarms)", rep.Verdict, g.AlarmCount, d.Verdict, d.Alarms)
	}
	if v := g.Verdict; v == nil || !v.Drifting || v.Change == nil || v.Change.Serial != d.ChangeSerial || v.Where != "L2-S1 / FX-07" {
		t.Errorf("verdict %+v, demo change at %s", g.Verdict, d.ChangeSerial)
	}
	for i := 1; i < len(g.Alarms); i++ {
		if g.Alarms[i].Unit < g.Alarms[i-1].Unit {
			t.Errorf("alarms not earliest first: %d after %d", g.Alarms[i].Unit, g.Alarms[i-1].Unit)
		}
	}
	if g.Points < 290 || g.Baseline.Points != 50 || g.Baseline.From == nil {
		t.Errorf("points %d, baseline %+v", g.Points, g.Baseline)
	}
	// Test limits as 'padline limits --variant QM-205' gives them with the
	// stand-in U of 0.3 pF: 10.30 … 59.70 pF.
	if lo, hi := float64(rep.Limits[0]), float64(rep.Limits[1]); math.Abs(lo-10.3) > 0.005 || math.Abs(hi-59.7) > 0.005 {
		t.Errorf("limits %v … %v", lo, hi)
	}
	var after *driftreport.Alarm
	for i := range g.Alarms {
		if a := &g.Alarms[i]; a.Unit >= 145 { // series index: a few units before have no trip point
			after = a
			break
		}
	}
	if after == nil || after.Unit > 200 || after.Serial == "" || after.Time == nil || after.RunID == 0 {
		t.Errorf("alarms %+v", g.Alarms)
	}
	if g.Capability == nil || !(float64(g.Capability.Cpk) > 1) || g.Capability.Method != "MR̄/d2" {
		t.Errorf("capability %+v %s", g.Capability, g.CapabilityNote)
	}
	y := g.Yield
	if y == nil || y.Total != 300 || !(float64(y.Low) < float64(y.Rate) && float64(y.Rate) < float64(y.High)) {
		t.Errorf("yield %+v", y)
	}
	if st, err := os.Stat(svg); err != nil || st.Size() == 0 || g.ChartFile != svg {
		t.Errorf("chart file %q: %v", g.ChartFile, err)
	}
	// Beside the control charts, the fail-code Pareto and the hourly
	// first-pass yield; each file as large as the report says.
	kinds := map[string]bool{}
	for _, f := range rep.ChartFiles {
		kinds[f.Kind] = true
		if st, err := os.Stat(f.Path); err != nil || st.Size() != f.Bytes || f.Bytes > 200<<10 {
			t.Errorf("chart file %+v: %v", f, err)
		}
		if f.Kind == "control" && (f.AlarmRuns == 0 || f.AlarmRuns > f.Alarms || f.Alarms != g.AlarmCount) {
			t.Errorf("control chart marks %d runs of %d alarms; the report has %d alarms", f.AlarmRuns, f.Alarms, g.AlarmCount)
		}
	}
	if len(rep.ChartFiles) != 3 || !kinds["control"] || !kinds["pareto"] || !kinds["hourly-yield"] {
		t.Errorf("chart files %+v", rep.ChartFiles)
	}

	// --by splits into groups, each reported; the demo ran on one fixture.
	by := driftJSON(t, "drift", "--db", db, "--variant", "QM-205", "--by", "fixture", "--chart", "xbar-r", "--subgroup", "5")
	if len(by.Groups) != 1 || by.Groups[0].Key != "FX-07" || by.Groups[0].Charts[0].Kind != "xbar" || by.Groups[0].Charts[0].Size != 5 {
		t.Errorf("by fixture: %+v", by.Groups)
	}
}

func TestDriftStudy(t *testing.T) {
	code, out, errOut := runCLI(t, "drift", "study", "--runs", "200", "--seed", "3")
	if code != 0 {
		t.Fatal(errOut)
	}
	// Study pairs the CUSUM (k 0.5, h 4) with its published ARL0 of 168
	// (the drift package's source list); the row must be there.
	if !strings.Contains(out, "200 runs per cell, seed 3") || !strings.Contains(out, "168") {
		t.Errorf("study table:\n%s", out)
	}
}

// scaleRuns yields n QM-205 runs, 4 s apart, trip points N(29.8, 4.2) pF
// with a 1 pF step after 90 % of them, 2 % failing.
func scaleRuns(n int, hash string) iter.Seq[*sequences.Run] {
	t0 := time.Date(2026, 1, 5, 6, 0, 0, 0, time.UTC)
	r := rand.New(rand.NewPCG(1, 2))
	return func(yield func(*sequences.Run) bool) {
		for i := range n {
			trip := 29.8 + 4.2*r.NormFloat64()
			if i > n*9/10 {
				trip++
			}
			v, code := sequences.Pass, ""
			if i%50 == 7 {
				v, code = sequences.Fail, "trip_high"
			}
			fin := t0.Add(time.Duration(i) * 4 * time.Second)
			run := &sequences.Run{
				Serial: fmt.Sprintf("QM205-%07d", i), Variant: "QM-205", ConfigHash: hash,
				Station: fmt.Sprintf("L%d-S1", 1+i%2), Fixture: fmt.Sprintf("FX-%02d", 7+i%4), Operator: "op-1",
				Lot: fmt.Sprintf("LOT-%d", i/5000), Software: "padline test", Started: fin.Add(-90 * time.Millisecond),
				Finished: fin, Verdict: v, FailCode: sequences.FailCode(code),
				Measurements: []sequences.Measurement{
					{Step: "clock", Name: "clock_hz", Value: 465, Unit: "Hz", Low: 241, High: 1271, Verdict: sequences.Pass},
					{Step: store.TripStep, Name: store.TripName, Value: trip, Unit: "pF", Low: 10.3, High: 59.7, Verdict: v},
					{Step: "trip_search", Name: "spread_pf", Value: 0.45, Unit: "pF", Low: math.NaN(), High: 1.5, Verdict: sequences.Pass},
				},
			}
			if !yield(run) {
				return
			}
		}
	}
}

// TestDriftScale seeds a million runs of QM-205 and times 'padline drift'
// in-process; the binary's peak RSS is measured with /usr/bin/time (see
// the comment at the top of this file).
func TestDriftScale(t *testing.T) {
	if !*driftScale {
		t.Skip("drift scale figures: go test ./cmd/padline -run TestDriftScale -drift.scale -v -timeout 30m")
	}
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "drift-1m.db")
	if *driftScaleDB != "" {
		path = *driftScaleDB
	}
	_, statErr := os.Stat(path)
	if statErr != nil {
		db, err := store.Open(path)
		if err != nil {
			t.Fatal(err)
		}
		raw, err := os.ReadFile(filepath.Join("..", "..", "testdata", "variants", "QM-205.yaml"))
		if err != nil {
			t.Fatal(err)
		}
		hash, err := db.PutVariant(ctx, "QM-205", raw)
		if err != nil {
			t.Fatal(err)
		}
		start := time.Now()
		n, err := db.Import(ctx, scaleRuns(*driftScaleRuns, hash), 10_000)
		if err != nil {
			t.Fatal(err)
		}
		t.Logf("seeded %d runs in %v", n, time.Since(start).Round(time.Millisecond))
		if err := db.Close(); err != nil {
			t.Fatal(err)
		}
	}
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	for range 2 {
		start := time.Now()
		pts, err := db.TripSeries(ctx, store.Filter{Variant: "QM-205"}, 0)
		el := time.Since(start)
		start = time.Now()
		c, err2 := db.Counts(ctx, store.Filter{Variant: "QM-205"})
		t.Logf("store alone: TripSeries %d points %v (%v), Counts %d runs %v (%v)", len(pts), el.Round(time.Millisecond), err,
			c.Runs, time.Since(start).Round(time.Millisecond), err2)
	}
	db.Close()
	for _, args := range [][]string{
		{"drift", "--db", path, "--variant", "QM-205"},
		{"drift", "--db", path, "--variant", "QM-205", "--json"},
		{"drift", "--db", path, "--variant", "QM-205", "--by", "fixture"},
	} {
		var out, errOut bytes.Buffer
		start := time.Now()
		code := run(ctx, args, strings.NewReader(""), &out, &errOut)
		el := time.Since(start)
		if code != 0 {
			t.Fatalf("%v: %s", args, errOut.String())
		}
		t.Logf("padline %s: %v, %d bytes out", strings.Join(args[1:], " "), el.Round(time.Millisecond), out.Len())
	}
}

// TestDriftChartsPassingUnitsByDefault: a failed unit's trip point (a
// defect the limits caught) stays off the charts unless --all-verdicts,
// while yield counts every unit either way.
func TestDriftChartsPassingUnitsByDefault(t *testing.T) {
	db := filepath.Join(t.TempDir(), "shift.db")
	// 300 units of the demo shift: the seed-1 line has failing units among
	// them (the demo's defect rates), some with a trip point.
	if _, errs, code := runPadline(t, context.Background(), "", "demo", "--units", "300", "--db", db); code != 0 {
		t.Fatalf("demo: %s", errs)
	}
	s, err := store.Open(db)
	if err != nil {
		t.Fatal(err)
	}
	all, err := s.TripValues(context.Background(), store.Filter{Variant: "QM-205"}, 0)
	if err != nil {
		t.Fatal(err)
	}
	pass, err := s.TripValues(context.Background(), store.Filter{Variant: "QM-205", Verdict: sequences.Pass}, 0)
	s.Close()
	if err != nil || len(pass) >= len(all) {
		t.Fatalf("the demo shift should hold failed units with trip points: %d of %d pass (%v)", len(pass), len(all), err)
	}
	points := func(args ...string) (n, runs int) {
		out, errs, code := runPadline(t, context.Background(), "", append([]string{"drift", "--db", db, "--variant", "QM-205", "--json"}, args...)...)
		if code != 0 {
			t.Fatalf("drift %v: %s", args, errs)
		}
		var rep struct {
			Groups []struct {
				Points int `json:"points"`
				Runs   int `json:"runs"`
			} `json:"groups"`
		}
		if err := json.Unmarshal([]byte(out), &rep); err != nil || len(rep.Groups) != 1 {
			t.Fatalf("drift json: %v\n%s", err, out)
		}
		return rep.Groups[0].Points, rep.Groups[0].Runs
	}
	n, runs := points()
	nAll, runsAll := points("--all-verdicts")
	if n != len(pass) || nAll != len(all) || runs != runsAll || runs < 300 {
		t.Errorf("charted %d (want %d passing) and %d with --all-verdicts (want %d); yield over %d and %d runs",
			n, len(pass), nAll, len(all), runs, runsAll)
	}
}

// TestDemoChangePoint: the estimated change point (Hinkley's maximum
// likelihood; drift.ChangePoint, checked on Montgomery Example 9.1) of a
// 4 pF (about 1σ) step injected at unit 500 of 1000 lands within ±10 units
// of the step in at least 9 of 10 seeds. Run with -v for the 10 figures.
func TestDemoChangePoint(t *testing.T) {
	if testing.Short() {
		t.Skip("10 demo shifts of 1000 units")
	}
	within := 0
	var figs []string
	for seed := 1; seed <= 10; seed++ {
		s := demoJSONSummary(t, "--units", "1000", "--drift-at", "500", "--drift-pf", "4", "--seed", fmt.Sprint(seed))
		if s.Drift == nil || s.Drift.ChangeAtUnit == 0 {
			t.Fatalf("seed %d: no change found: %+v", seed, s.Drift)
		}
		off := s.Drift.ChangeAtUnit - 500
		if off >= -10 && off <= 10 {
			within++
		}
		figs = append(figs, fmt.Sprintf("seed %d: change at unit %d (%+d)", seed, s.Drift.ChangeAtUnit, off))
	}
	t.Logf("step at unit 500:\n%s", strings.Join(figs, "\n"))
	if within < 9 {
		t.Errorf("%d of 10 seeds within ±10 units of the step, want ≥ 9:\n%s", within, strings.Join(figs, "\n"))
	}
}
