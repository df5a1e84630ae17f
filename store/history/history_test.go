package history

import (
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"errors"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"padline/sequences"
	"padline/store"
)

// t0 is the seeded log's first finish time.
var t0 = time.Date(2026, 11, 30, 8, 0, 0, 0, time.UTC)

// seedLog writes a small shift log: QM205-000001 fails low then passes on
// a retest, then QM-205's file changes; QM205-000002 passes (lot "L,1" needs CSV quoting), QM205-000003
// is a station fault with no trip point, and one run of another variant.
// Every run but the last is driver, as given.
func seedLog(t *testing.T, driver string) string {
	t.Helper()
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "shift.db")
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	hashes := map[string]string{}
	for _, v := range []string{"QM-205", "QM-212"} {
		if hashes[v], err = db.PutVariant(ctx, v, []byte("name: "+v+"\n")); err != nil {
			t.Fatal(err)
		}
	}
	trip := func(v float64, verdict sequences.Verdict) []sequences.Measurement {
		return []sequences.Measurement{{Step: sequences.StepTripSearch, Name: sequences.MeasTripPF, Value: v, Unit: "pF",
			Low: 10.3, High: 59.7, Verdict: verdict}}
	}
	runs := []sequences.Run{
		{Serial: "QM205-000001", Variant: "QM-205", Verdict: sequences.Fail, FailCode: sequences.CodeTripLow, Lot: "L7",
			Measurements: trip(8.25, sequences.Fail)},
		{Serial: "QM205-000001", Variant: "QM-205", Verdict: sequences.Pass, Lot: "L7", Measurements: append(trip(31.5, sequences.Pass),
			// as the session flags a pass after a fail (sequences.FlagPassAfterFail)
			sequences.Measurement{Step: sequences.StepRetest, Name: sequences.MeasPriorFails, Value: 1, Unit: "count",
				Low: sequences.NoLimit, High: sequences.NoLimit, Verdict: sequences.Pass})},
		{Serial: "QM205-000002", Variant: "QM-205", Verdict: sequences.Pass, Lot: "L,1", Measurements: trip(29.125, sequences.Pass)},
		{Serial: "QM205-000003", Variant: "QM-205", Verdict: sequences.StationFault, FailCode: sequences.CodePinError, Lot: "L7"},
		{Serial: "QM212-000001", Variant: "QM-212", Verdict: sequences.Pass, Measurements: trip(20, sequences.Pass)},
	}
	for i := range runs {
		r := &runs[i]
		if i == 2 { // QM-205's file changes after the retest
			if hashes["QM-205"], err = db.PutVariant(ctx, "QM-205", []byte("name: QM-205\nchanged: true\n")); err != nil {
				t.Fatal(err)
			}
		}
		r.ConfigHash, r.Station, r.Fixture, r.Operator, r.Software, r.Driver = hashes[r.Variant], "L2-S1", "FX-07", "ana", "padline test", driver
		r.Started = t0.Add(time.Duration(i) * time.Minute)
		r.Finished = r.Started.Add(150 * time.Millisecond)
		if _, err := db.Record(ctx, r); err != nil {
			t.Fatal(err)
		}
	}
	return path
}

// write runs Write with the query q on the log at path.
func write(t *testing.T, path string, q Query) (string, error) {
	t.Helper()
	q.DB = path
	opts, err := q.Options(t0.Add(24 * time.Hour))
	if err != nil {
		t.Fatalf("options %+v: %v", q, err)
	}
	var b bytes.Buffer
	err = Write(context.Background(), &b, opts)
	return b.String(), err
}

func TestTableOfASerial(t *testing.T) {
	path := seedLog(t, "sim")
	out, err := write(t, path, Query{Serial: "QM205-000001"})
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(out), "\n")
	// header, two runs each with traceability and its measurements (the
	// retest's flag too), the tally, the retest note.
	if len(lines) != 1+3+4+2 {
		t.Fatalf("%d lines:\n%s", len(lines), out)
	}
	for _, want := range []string{
		"trip_low", "8.250", "pass (retest)", "31.500",
		"operator ana  software padline test", "[10.3, 59.7]", "prior_fails", "[-inf, +inf]",
		"2 runs: 1 pass, 1 fail, 0 station-fault", "1 pass(es) after an earlier fail",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("table lacks %q:\n%s", want, out)
		}
	}
	if strings.Contains(out, "QM205-000002") {
		t.Errorf("another serial in the serial's table:\n%s", out)
	}
	// The configuration is named by the first 12 hex digits of its hash.
	if !regexp.MustCompile(`variant QM-205  config [0-9a-f]{12}  `).MatchString(lines[2]) {
		t.Errorf("traceability line %q", lines[2])
	}
}

func TestTableOfAVariant(t *testing.T) {
	path := seedLog(t, "sim")
	out, err := write(t, path, Query{Variant: "QM-205"})
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(out, "4 runs: 2 pass, 1 fail, 1 station-fault") || strings.Contains(out, "QM212") {
		t.Errorf("variant table:\n%s", out)
	}
	// The station fault has no trip point: "-", never NaN; no
	// measurement details without --serial.
	sf := lineWith(out, "QM205-000003")
	if !strings.HasSuffix(strings.TrimSpace(sf), " -") || strings.Contains(out, "NaN") || strings.Contains(out, "    variant") {
		t.Errorf("station-fault row %q in:\n%s", sf, out)
	}
	// Filters narrow it; one run is "run", not "runs".
	out, err = write(t, path, Query{Variant: "QM-205", Verdict: "station-fault"})
	if err != nil || !strings.Contains(out, "1 run: 0 pass, 0 fail, 1 station-fault") {
		t.Errorf("--verdict station-fault: %v\n%s", err, out)
	}
	out, err = write(t, path, Query{Variant: "QM-205", Since: "2026-11-30 08:02", Until: "2026-11-30 08:03"})
	if err != nil || !strings.Contains(out, "1 run:") || !strings.Contains(out, "QM205-000002") {
		t.Errorf("--since/--until: %v\n%s", err, out)
	}
	out, err = write(t, path, Query{Variant: "QM-999"})
	if err != nil || !strings.Contains(out, "no runs match in "+path) {
		t.Errorf("no match: %v\n%s", err, out)
	}
}

func lineWith(s, sub string) string {
	for _, l := range strings.Split(s, "\n") {
		if strings.Contains(l, sub) {
			return l
		}
	}
	return ""
}

func TestCSV(t *testing.T) {
	path := seedLog(t, "sim")
	out, err := write(t, path, Query{Variant: "QM-205", Format: "csv"})
	if err != nil {
		t.Fatal(err)
	}
	rows, err := csv.NewReader(strings.NewReader(out)).ReadAll()
	if err != nil {
		t.Fatalf("not CSV: %v\n%s", err, out)
	}
	if len(rows) != 5 || strings.Join(rows[0], ",") != strings.Join(store.RunCSVHeader, ",") {
		t.Fatalf("%d rows, header %v", len(rows), rows[0])
	}
	col := map[string]int{}
	for i, h := range rows[0] {
		col[h] = i
	}
	if r := rows[3]; r[col["lot"]] != "L,1" || r[col["trip_pf"]] != "29.125" || r[col["serial"]] != "QM205-000002" {
		t.Errorf("row of QM205-000002: %v", r)
	}
	if r := rows[4]; r[col["trip_pf"]] != "" || r[col["verdict"]] != "station-fault" {
		t.Errorf("station fault's row (no trip point): %v", r)
	}
	// One row per measurement: the station fault has none.
	out, err = write(t, path, Query{Variant: "QM-205", Format: "csv", Per: "measurement"})
	if err != nil {
		t.Fatal(err)
	}
	if rows, err := csv.NewReader(strings.NewReader(out)).ReadAll(); err != nil || len(rows) < 4 {
		t.Fatalf("per measurement: %v, %d rows\n%s", err, len(rows), out)
	}
}

func TestJSONLines(t *testing.T) {
	path := seedLog(t, "sim")
	out, err := write(t, path, Query{Serial: "QM205-000001", JSON: true})
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(out), "\n")
	if len(lines) != 2 {
		t.Fatalf("%d JSON lines:\n%s", len(lines), out)
	}
	var first map[string]any
	if err := json.Unmarshal([]byte(lines[0]), &first); err != nil {
		t.Fatal(err)
	}
	ms, _ := first["measurements"].([]any)
	if first["serial"] != "QM205-000001" || first["verdict"] != "fail" || len(ms) != 1 {
		t.Fatalf("first run: %v", first)
	}
	m, _ := ms[0].(map[string]any)
	if v, _ := m["value"].(float64); math.Abs(v-8.25) > 1e-12 {
		t.Errorf("measurement %v, want value 8.25", m)
	}
}

func TestLimitsHistory(t *testing.T) {
	path := seedLog(t, "sim")
	out, err := write(t, path, Query{Variant: "QM-205", LimitsHistory: true})
	if err != nil || !strings.Contains(out, "QM-205: 2 configurations\n") {
		t.Errorf("table: %v\n%s", err, out)
	}
	out, err = write(t, path, Query{Variant: "QM-212", LimitsHistory: true})
	if err != nil || !strings.Contains(out, "QM-212: 1 configuration\n") {
		t.Errorf("table: %v\n%s", err, out)
	}
	out, err = write(t, path, Query{Variant: "QM-205", LimitsHistory: true, Format: "csv"})
	if err != nil || !strings.HasPrefix(out, "variant,config_hash,first_seen,bytes\nQM-205,") || strings.Count(out, "\n") != 3 {
		t.Errorf("csv: %v\n%s", err, out)
	}
	out, err = write(t, path, Query{Variant: "QM-999", LimitsHistory: true})
	if err != nil || !strings.Contains(out, "no configuration of QM-999") {
		t.Errorf("an unknown variant: %v\n%s", err, out)
	}
}

// In a log with runs of a real station, simulated runs are left out unless
// asked for.
func TestSimulatedLeftOutBesideReal(t *testing.T) {
	path := seedLog(t, "sim")
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	hash, err := db.PutVariant(context.Background(), "QM-205", []byte("name: QM-205\nchanged: true\n"))
	if err != nil {
		t.Fatal(err)
	}
	real := &sequences.Run{Serial: "QM205-000009", Variant: "QM-205", ConfigHash: hash, Verdict: sequences.Pass, Driver: "gpio",
		Started: t0.Add(time.Hour), Finished: t0.Add(time.Hour + time.Second)}
	if _, err := db.Record(context.Background(), real); err != nil {
		t.Fatal(err)
	}
	db.Close()
	out, err := write(t, path, Query{Variant: "QM-205"})
	if err != nil || !strings.Contains(out, "1 run: 1 pass") || !strings.Contains(out, "QM205-000009") {
		t.Errorf("real runs only: %v\n%s", err, out)
	}
	out, err = write(t, path, Query{Variant: "QM-205", IncludeSimulated: true})
	if err != nil || !strings.Contains(out, "5 runs:") {
		t.Errorf("--include-simulated: %v\n%s", err, out)
	}
}

// A missing shift log is an error naming it, and history never creates it.
func TestMissingLogNotCreated(t *testing.T) {
	path := filepath.Join(t.TempDir(), "none.db")
	_, err := write(t, path, Query{Variant: "QM-205"})
	if err == nil || !strings.Contains(err.Error(), "no shift log at "+path) {
		t.Fatalf("err %v", err)
	}
	if _, err := os.Stat(path); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("history created %s: %v", path, err)
	}
}

func TestQueryOptions(t *testing.T) {
	now := t0
	for _, tc := range []struct {
		q    Query
		want string // "" for no error
	}{
		{Query{}, "give --serial S or --variant V, or --panel P"},
		{Query{Variant: "V", Per: "lot"}, "--per must be run or measurement"},
		{Query{Variant: "V", Format: "xml"}, "--format must be table, csv or json"},
		{Query{Variant: "V", Format: "csv", FormatGiven: true, JSON: true}, "--json conflicts with --format csv"},
		{Query{Variant: "V", Verdict: "ok"}, `--verdict must be pass, fail or station-fault, got "ok"`},
		{Query{Panel: "P", Site: -1}, "--site -1: sites count from 1"},
		{Query{Serial: "S", LimitsHistory: true}, "--limits-history needs --variant"},
		{Query{Variant: "V", Since: "yesterday"}, "--since:"},
		{Query{Variant: "V", Until: "8x"}, "--until:"},
		{Query{Variant: "V", JSON: true, Format: "json", FormatGiven: true}, ""},
		{Query{Panel: "P", Site: 2}, ""},
	} {
		opts, err := tc.q.Options(now)
		switch {
		case tc.want == "" && err != nil:
			t.Errorf("%+v: %v", tc.q, err)
		case tc.want != "" && (err == nil || !strings.Contains(err.Error(), tc.want)):
			t.Errorf("%+v: err %v, want %q", tc.q, err, tc.want)
		case tc.want == "" && tc.q.JSON && opts.Format != "json":
			t.Errorf("--json gives format %q", opts.Format)
		}
	}
	// Defaults, and relative times anchored at now.
	opts, err := Query{Variant: "V", Since: "8h", Verdict: "fail"}.Options(now)
	if err != nil {
		t.Fatal(err)
	}
	if opts.Format != "table" || opts.Per != "run" || !opts.Filter.Since.Equal(now.Add(-8*time.Hour)) || opts.Filter.Verdict != sequences.Fail {
		t.Errorf("options %+v", opts)
	}
}
