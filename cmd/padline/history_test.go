package main

import (
	"bufio"
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"padline/sequences"
	"padline/store"
)

// historyCLI runs padline in-process and returns its exit status and output.
func historyCLI(t *testing.T, args ...string) (code int, stdout, stderr string) {
	t.Helper()
	var out, errOut bytes.Buffer
	code = run(context.Background(), args, strings.NewReader(""), &out, &errOut)
	return code, out.String(), errOut.String()
}

// seedHistory writes a small shift log of Quillmoor Padworks (fictional)
// units: QM205-A fails high then passes on retest, QM205-B passes, QM205-C
// is a station fault, QM212-A passes on another station. QM-205's limits
// change once, between the first and the second day.
func seedHistory(t *testing.T) string {
	t.Helper()
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "shift.db")
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	v205, err := os.ReadFile(filepath.Join("..", "..", "testdata", "variants", "QM-205.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	h1, err := db.PutVariant(ctx, "QM-205", v205)
	if err != nil {
		t.Fatal(err)
	}
	h2, err := db.PutVariant(ctx, "QM-205", append(bytes.Clone(v205), "# limits reviewed\n"...))
	if err != nil {
		t.Fatal(err)
	}
	h212, err := db.PutVariant(ctx, "QM-212", []byte("variant: QM-212\n"))
	if err != nil {
		t.Fatal(err)
	}
	day1 := time.Date(2026, 11, 27, 12, 0, 0, 0, time.UTC)
	day2 := time.Date(2026, 11, 30, 12, 0, 0, 0, time.UTC)
	mk := func(serial, variant, hash, station string, at time.Time, v sequences.Verdict, code string, trip float64) *sequences.Run {
		r := &sequences.Run{
			Serial: serial, Variant: variant, ConfigHash: hash, Station: station, Fixture: "FX-07",
			Operator: "op-3", Lot: "LOT-17", Software: "padline test", Started: at.Add(-3 * time.Second),
			Finished: at, Verdict: v, FailCode: sequences.FailCode(code),
			Measurements: []sequences.Measurement{
				{Step: "clock", Name: "clock_hz", Value: 465.2, Unit: "Hz", Low: 380, High: 560, Verdict: sequences.Pass},
			},
		}
		if !math.IsNaN(trip) {
			r.Measurements = append(r.Measurements, sequences.Measurement{
				Step: "trip_search", Name: "trip_pf", Value: trip, Unit: "pF", Low: 15.2, High: 18.2, Verdict: v,
			})
		}
		return r
	}
	runs := []*sequences.Run{
		mk("QM205-A", "QM-205", h1, "L2-S1", day1, sequences.Fail, "trip_high", 18.9),
		mk("QM205-B", "QM-205", h1, "L2-S1", day1.Add(time.Minute), sequences.Pass, "", 16.7),
		mk("QM205-A", "QM-205", h2, "L2-S1", day2, sequences.Pass, "", 16.8),
		mk("QM205-C", "QM-205", h2, "L2-S1", day2.Add(time.Minute), sequences.StationFault, "lid_open", math.NaN()),
		mk("QM212-A", "QM-212", h212, "L2-S2", day2.Add(2*time.Minute), sequences.Pass, "", 22.1),
	}
	for _, r := range runs {
		if _, err := db.Record(ctx, r); err != nil {
			t.Fatal(err)
		}
	}
	return path
}

// tableSerials returns the SERIAL column of a history table's run lines.
func tableSerials(out string) []string {
	var s []string
	for _, line := range strings.Split(out, "\n") {
		f := strings.Fields(line)
		if len(f) > 3 && len(f[1]) == 10 && f[1][4] == '-' && f[1][7] == '-' {
			s = append(s, f[3])
		}
	}
	return s
}

func TestHistoryTable(t *testing.T) {
	db := seedHistory(t)
	tests := []struct {
		name    string
		args    []string
		serials string
		has     []string
	}{
		{"serial", []string{"--serial", "QM205-A"}, "QM205-A QM205-A",
			[]string{"trip_high", "18.900", "16.800", "trip_pf", "[15.2, 18.2]", "[380, 560]", "2 runs: 1 pass, 1 fail, 0 station-fault"}},
		{"variant", []string{"--variant", "QM-205"}, "QM205-A QM205-B QM205-A QM205-C",
			[]string{"lid_open", "4 runs: 2 pass, 1 fail, 1 station-fault"}},
		{"verdict", []string{"--variant", "QM-205", "--verdict", "fail"}, "QM205-A", []string{"1 run: 0 pass, 1 fail"}},
		// local midnight of 11-29 lies between the two days in every time zone
		{"since date", []string{"--variant", "QM-205", "--since", "2026-11-29"}, "QM205-A QM205-C", nil},
		{"until", []string{"--variant", "QM-205", "--until", "2026-11-30T12:00:00Z"}, "QM205-A QM205-B", nil},
		{"station", []string{"--variant", "QM-212", "--station-id", "L2-S2", "--lot", "LOT-17", "--fixture", "FX-07"}, "QM212-A", nil},
		{"none", []string{"--variant", "QM-205", "--station-id", "L9-S9"}, "", []string{"no runs match"}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			code, out, errOut := historyCLI(t, append([]string{"history", "--db", db}, tt.args...)...)
			if code != 0 {
				t.Fatalf("exit %d: %s", code, errOut)
			}
			if got := strings.Join(tableSerials(out), " "); got != tt.serials {
				t.Errorf("serials %q, want %q\n%s", got, tt.serials, out)
			}
			for _, s := range tt.has {
				if !strings.Contains(out, s) {
					t.Errorf("output lacks %q:\n%s", s, out)
				}
			}
		})
	}
}

func TestHistoryCSVAndJSON(t *testing.T) {
	db := seedHistory(t)
	// One row per run by default: header + 4 runs of QM-205.
	code, out, errOut := historyCLI(t, "history", "--db", db, "--variant", "QM-205", "--format", "csv")
	if code != 0 {
		t.Fatalf("csv: exit %d: %s", code, errOut)
	}
	if recs, err := csv.NewReader(strings.NewReader(out)).ReadAll(); err != nil || len(recs) != 5 || strings.Join(recs[0], ",") != strings.Join(store.RunCSVHeader, ",") {
		t.Errorf("csv per run: %d rows, %v", len(recs), err)
	}
	code, out, errOut = historyCLI(t, "history", "--db", db, "--variant", "QM-205", "--format", "csv", "--per", "measurement")
	if code != 0 {
		t.Fatalf("csv: exit %d: %s", code, errOut)
	}
	recs, err := csv.NewReader(strings.NewReader(out)).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	// header + 2 + 2 + 2 + 1 measurement rows (QM205-C has no trip)
	if len(recs) != 8 || strings.Join(recs[0], ",") != strings.Join(store.CSVHeader, ",") {
		t.Errorf("csv has %d rows, header %v", len(recs), recs[0])
	}

	for _, flag := range [][]string{{"--json"}, {"--format", "json"}} {
		code, out, errOut = historyCLI(t, append([]string{"history", "--db", db, "--serial", "QM205-A"}, flag...)...)
		if code != 0 {
			t.Fatalf("%v: exit %d: %s", flag, code, errOut)
		}
		sc := bufio.NewScanner(strings.NewReader(out))
		var trips []float64
		for sc.Scan() {
			var j store.JSONRun
			if err := json.Unmarshal(sc.Bytes(), &j); err != nil {
				t.Fatalf("%v: %v in %q", flag, err, sc.Text())
			}
			if j.TripPF == nil || j.Serial != "QM205-A" || len(j.Measurements) != 2 {
				t.Fatalf("%v: line %q", flag, sc.Text())
			}
			trips = append(trips, *j.TripPF)
		}
		if fmt.Sprint(trips) != "[18.9 16.8]" {
			t.Errorf("%v: trips %v, want [18.9 16.8]", flag, trips)
		}
	}
}

func TestHistoryLimitsHistory(t *testing.T) {
	db := seedHistory(t)
	code, out, errOut := historyCLI(t, "history", "--db", db, "--limits-history", "--variant", "QM-205")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errOut)
	}
	if !strings.Contains(out, "QM-205: 2 configurations") {
		t.Errorf("output:\n%s", out)
	}
	code, out, _ = historyCLI(t, "history", "--db", db, "--limits-history", "--variant", "QM-205", "--json")
	if code != 0 || strings.Count(out, "\n") != 2 || !strings.Contains(out, `"config_hash"`) {
		t.Errorf("json exit %d:\n%s", code, out)
	}
}

func TestHistoryShiftLogFromEnvironment(t *testing.T) {
	db := seedHistory(t)
	t.Setenv("PADLINE_DB", db)
	code, out, errOut := historyCLI(t, "history", "--serial", "QM212-A")
	if code != 0 || strings.Join(tableSerials(out), " ") != "QM212-A" {
		t.Fatalf("exit %d: %s%s", code, out, errOut)
	}
	// --db beats the environment.
	missing := filepath.Join(t.TempDir(), "none.db")
	code, _, errOut = historyCLI(t, "history", "--db", missing, "--serial", "QM212-A")
	if code != 1 || !strings.Contains(errOut, "no shift log at "+missing) {
		t.Errorf("exit %d: %s", code, errOut)
	}
	if _, err := os.Stat(missing); err == nil {
		t.Error("history created a shift log")
	}
}

func TestHistoryShiftLogFromStationFile(t *testing.T) {
	db := seedHistory(t)
	raw, err := os.ReadFile(filepath.Join("..", "..", "testdata", "stations", "demo-sim.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Contains(raw, []byte("shift_log: padline-shift.db")) {
		t.Fatal("demo-sim.yaml no longer names padline-shift.db; update this test")
	}
	raw = bytes.Replace(raw, []byte("shift_log: padline-shift.db"), []byte("shift_log: "+db), 1)
	station := filepath.Join(t.TempDir(), "L2-S1.yaml")
	if err := os.WriteFile(station, raw, 0o644); err != nil {
		t.Fatal(err)
	}
	code, out, errOut := historyCLI(t, "history", "--station-file", station, "--serial", "QM205-B")
	if code != 0 || strings.Join(tableSerials(out), " ") != "QM205-B" {
		t.Fatalf("exit %d: %s%s", code, out, errOut)
	}
	// The environment beats the station file.
	t.Setenv("PADLINE_DB", filepath.Join(t.TempDir(), "elsewhere.db"))
	code, _, errOut = historyCLI(t, "history", "--station-file", station, "--serial", "QM205-B")
	if code != 1 || !strings.Contains(errOut, "elsewhere.db") {
		t.Errorf("exit %d: %s", code, errOut)
	}
}

func TestHistoryErrors(t *testing.T) {
	db := seedHistory(t)
	junk := filepath.Join(t.TempDir(), "junk.db")
	if err := os.WriteFile(junk, []byte("not a database at all, just text\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		args []string
		msg  string
	}{
		{[]string{"--db", db}, "give --serial S or --variant V"},
		{[]string{"--db", db, "--variant", "QM-205", "--verdict", "good"}, "--verdict must be pass, fail or station-fault"},
		{[]string{"--db", db, "--variant", "QM-205", "--format", "xml"}, "--format must be table, csv or json"},
		{[]string{"--db", db, "--variant", "QM-205", "--format", "csv", "--json"}, "--json conflicts with --format csv"},
		{[]string{"--db", db, "--variant", "QM-205", "--since", "yesterday"}, "--since: \"yesterday\" is neither"},
		{[]string{"--db", db, "--serial", "X", "--limits-history"}, "--limits-history needs --variant"},
		{[]string{"--db", junk, "--serial", "X"}, "not a padline shift log"},
	}
	for _, tt := range tests {
		t.Run(tt.msg, func(t *testing.T) {
			code, _, errOut := historyCLI(t, append([]string{"history"}, tt.args...)...)
			if code != 1 || !strings.Contains(errOut, tt.msg) {
				t.Errorf("exit %d, stderr %q; want 1 and %q", code, errOut, tt.msg)
			}
		})
	}
}

func TestHistoryHelp(t *testing.T) {
	code, out, _ := historyCLI(t, "history", "--help")
	if code != 0 {
		t.Fatalf("exit %d", code)
	}
	for _, s := range []string{"padline history --serial", "PADLINE_DB", defaultShiftLog, "--limits-history", "--since"} {
		if !strings.Contains(out, s) {
			t.Errorf("help lacks %q", s)
		}
	}
}
