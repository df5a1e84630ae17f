package plant_test

import (
	"context"
	"encoding/json"
	"fmt"
	"strings"
	"testing"
	"time"

	"padline/store"
	"padline/store/plant"
)

// A small batch (at most 200 runs: arrays in one round trip, putSmall)
// holding a station check under another station's id (row-level security)
// and a study whose results jsonb refuses (a \u0000 escape: valid JSON, but
// PostgreSQL's jsonb cannot hold it, error 22P05; PostgreSQL manual, 8.14
// "JSON Types") is refused as a whole transaction; Put stores it again on the
// staging path under savepoints, so the two rows are refused and reported
// (Result.Refused, the shift log's plant_refused) and the runs, the good
// check and the good study land, once. The two forwarded batches resolve
// their names on the connection (they carry the configuration); sending
// everything again without it, to a handle that knows the log and every
// name, is the one-round-trip case: nothing new lands, the same rows are
// refused.
func TestBadTrustRowsSmallBatch(t *testing.T) {
	url, schema := newSchema(t, baseURL())
	ctx := context.Background()
	admin := openPlant(t, url)
	roleA, roleB := schema+"_a", schema+"_b"
	register(t, admin, plant.Station{Name: "T-S1", Line: "LT", Role: roleA}, plant.Station{Name: "T-S2", Line: "LT", Role: roleB})
	start := time.Date(2026, 12, 1, 6, 0, 0, 0, time.UTC)
	log := stationLog(t, tempLog(t, "t1"), "T-S1", 5, start, 21)
	details := json.RawMessage(`{"faults":[]}`)
	check := func(station string, at time.Time) int64 {
		t.Helper()
		id, err := log.RecordCheck(ctx, store.StationCheck{Time: at, Station: station, Fixture: "FX-T-S1", StationHash: "abc", OK: true, Details: details})
		if err != nil {
			t.Fatal(err)
		}
		return id
	}
	study := func(results string, at time.Time) int64 {
		t.Helper()
		id, err := log.RecordStudy(ctx, store.Study{Kind: store.StudyType1, Time: at, Station: "T-S1", Fixture: "FX-T-S1", Results: json.RawMessage(results)})
		if err != nil {
			t.Fatal(err)
		}
		return id
	}
	goodCheck, forgedCheck := check("T-S1", start), check("T-S2", start.Add(time.Second))
	goodStudy, nulStudy := study(`{"n":50}`, start), study(`{"n":50,"note":"\u0000"}`, start.Add(time.Second))

	p := openPlant(t, asRole(url, roleA))
	var results []plant.Result
	f := forwarder(log, p, "T-S1")
	f.OnBatch = func(r plant.Result) { results = append(results, r) }
	if err := f.Drain(ctx); err != nil {
		t.Fatal(err)
	}
	want := []store.Refusal{{Kind: "check", LocalID: forgedCheck}, {Kind: "study", LocalID: nulStudy}}
	if len(results) != 1 || results[0].RunsLanded != 5 || results[0].Landed != 5+1+1 || results[0].Duplicates != 0 || !refusedAs(results[0].Refused, want) {
		t.Fatalf("first batch: %+v, want 5 runs, a check and a study landed, refused %+v", results, want)
	}
	if r := results[0].Refused; !strings.Contains(r[0].Reason, "row-level security") || !strings.Contains(r[1].Reason, "22P05") {
		t.Fatalf("reasons: %q / %q", r[0].Reason, r[1].Reason)
	}
	o, _ := log.OutboxState(ctx)
	if o.Refused != 2 || o.Forwarded != 5 || o.BacklogRuns+o.BacklogChecks+o.BacklogStudies != 0 || o.LastError != "" {
		t.Fatalf("outbox after the first batch: %+v", o)
	}
	rows, err := log.RefusedRows(ctx, 10)
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != 2 {
		t.Fatalf("shift log notes %d refused rows, want 2: %+v", len(rows), rows)
	}
	plantHolds(t, admin, log, 5, []int64{goodCheck}, []int64{goodStudy})

	// The second batch: three more runs, a check under T-S2 again and a
	// good study.
	hash := store.HashConfig([]byte("name: QM-205\n# demo variant of the tests\n"))
	for i := range 3 {
		if _, err := log.Record(ctx, simRun("T-S1", fmt.Sprintf("QM205-T2-%d", i), hash, start.Add(time.Hour+time.Duration(i)*time.Second), 30, false, false)); err != nil {
			t.Fatal(err)
		}
	}
	forged2, good2 := check("T-S2", start.Add(time.Hour)), study(`{"n":50}`, start.Add(time.Hour))
	results = nil
	// A new forwarder (the one before keeps the outbox's state for a few
	// seconds and would find the new check later), on the same plant
	// handle, which knows the log and the names.
	f = forwarder(log, p, "T-S1")
	f.OnBatch = func(r plant.Result) { results = append(results, r) }
	if err := f.Drain(ctx); err != nil {
		t.Fatal(err)
	}
	if len(results) != 1 || results[0].RunsLanded != 3 || results[0].Landed != 3+1 || !refusedAs(results[0].Refused, []store.Refusal{{Kind: "check", LocalID: forged2}}) {
		t.Fatalf("second batch: %+v, want 3 runs and a study landed, check %d refused", results, forged2)
	}
	if o, _ := log.OutboxState(ctx); o.Refused != 3 || o.Forwarded != 8 || o.LastError != "" {
		t.Fatalf("outbox after the second batch: %+v", o)
	}
	plantHolds(t, admin, log, 8, []int64{goodCheck}, []int64{goodStudy, good2})

	// Everything sent again, as one small batch without configurations
	// (putSmall's one round trip): nothing new lands, the same three rows
	// are refused.
	o, _ = log.OutboxState(ctx)
	runs, err := log.PendingRuns(ctx, 0, 100)
	if err != nil {
		t.Fatal(err)
	}
	checks, err := log.PendingChecks(ctx, 0, 100)
	if err != nil {
		t.Fatal(err)
	}
	studies, err := log.PendingStudies(ctx, 0, 100)
	if err != nil {
		t.Fatal(err)
	}
	res, err := p.Put(ctx, &plant.Batch{Log: o.LogUUID, Station: "T-S1", Sent: time.Now(), Runs: runs, Checks: checks, Studies: studies})
	if err != nil {
		t.Fatal(err)
	}
	if res.Landed != 0 || res.Duplicates != 8+1+2 || len(res.Refused) != 3 {
		t.Fatalf("replay: %+v, want nothing landed, 11 already stored, 3 refused", res)
	}
	plantHolds(t, admin, log, 8, []int64{goodCheck}, []int64{goodStudy, good2})
}

// refusedAs reports whether got names the rows of want (kind and id), in
// order.
func refusedAs(got, want []store.Refusal) bool {
	if len(got) != len(want) {
		return false
	}
	for i := range got {
		if got[i].Kind != want[i].Kind || got[i].LocalID != want[i].LocalID {
			return false
		}
	}
	return true
}

// plantHolds checks that the plant holds every run of log once, with its
// measurements, and exactly the station checks and studies given (by
// their id in log).
func plantHolds(t *testing.T, p *plant.DB, log *store.DB, runs int64, checks, studies []int64) {
	t.Helper()
	ctx := context.Background()
	var n, distinct, meas, wantMeas int64
	if err := p.QueryRowForTest(ctx, `SELECT count(*), count(DISTINCT local_id) FROM runs`, &n, &distinct); err != nil {
		t.Fatal(err)
	}
	if err := p.QueryRowForTest(ctx, `SELECT count(*) FROM measurements`, &meas); err != nil {
		t.Fatal(err)
	}
	for _, e := range entries(t, log.Runs(ctx, store.Filter{})) {
		wantMeas += int64(len(e.Measurements))
	}
	if n != runs || distinct != runs || meas != wantMeas {
		t.Fatalf("plant holds %d runs (%d ids), %d measurements; want %d, %d", n, distinct, meas, runs, wantMeas)
	}
	for _, c := range []struct {
		table string
		ids   []int64
	}{{"station_checks", checks}, {"studies", studies}} {
		var got string
		if err := p.QueryRowForTest(ctx, `SELECT coalesce(string_agg(local_id::text, ',' ORDER BY local_id), '') FROM `+c.table, &got); err != nil {
			t.Fatal(err)
		}
		if want := strings.Trim(strings.Join(strings.Fields(fmt.Sprint(c.ids)), ","), "[]"); got != want {
			t.Fatalf("plant %s: ids %q, want %q", c.table, got, want)
		}
	}
}
