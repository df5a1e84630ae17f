package driftreport

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"padline/sequences"
	"padline/store"
	"padline/store/plant"
	"padline/store/plant/planttest"
)

// plantSchema makes a migrated plant schema of the test's own and drops it
// after (planttest.URL: it skips without a server, or fails then under
// PADLINE_REQUIRE_PARTS=1).
func plantSchema(t *testing.T) string { return planttest.URL(t, "plant_drb") }

// An approved baseline on the plant store (DEVELOPERS.md "Approved
// baselines on the plant"): before one is approved there, drift on the
// plant says its baseline is provisional (it used to take the first 50
// points silently while the station's log charted against its approved
// one); approved over the same window as on the station's log, it has the
// same centre, σ, n and window, and drift gives the same numbers on both —
// limits, alarms (unit, serial, time), verdict, capability and yield — for
// the whole variant and by station.
func TestPlantApprovedBaseline(t *testing.T) {
	url := plantSchema(t)
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "shift.db")
	log, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer log.Close()
	hash, err := log.PutVariant(ctx, "QM-205", []byte("name: QM-205\n"))
	if err != nil {
		t.Fatal(err)
	}
	// 500 units 4 s apart, trip points N(29.8, 0.3) pF with a 0.6 pF step
	// from unit 300 on, 2 % failing and retested once on this station.
	r := rand.New(rand.NewPCG(5, 17))
	t0 := time.Date(2026, 11, 23, 6, 0, 0, 0, time.UTC)
	var runs []*sequences.Run
	for i := range 500 {
		trip := 29.8 + 0.3*r.NormFloat64()
		if i >= 300 {
			trip += 0.6
		}
		serial := fmt.Sprintf("QM205-%06d", i+1)
		v, code := sequences.Pass, sequences.FailCode("")
		if i%50 == 7 {
			v, code = sequences.Fail, sequences.CodeTripHigh
		}
		if i%50 == 9 {
			serial = fmt.Sprintf("QM205-%06d", i-1) // the retest of unit i-2
		}
		fin := t0.Add(time.Duration(i) * 4 * time.Second)
		runs = append(runs, &sequences.Run{Serial: serial, Variant: "QM-205", ConfigHash: hash, Station: "L1-S1", Fixture: "FX-07",
			Lot: "LOT-A", Started: fin.Add(-90 * time.Millisecond), Finished: fin, Verdict: v, FailCode: code, Driver: "sim",
			Measurements: []sequences.Measurement{{Step: store.TripStep, Name: store.TripName, Value: trip, Unit: "pF", Low: 25, High: 34, Verdict: v}}})
	}
	if _, err := log.Import(ctx, func(yield func(*sequences.Run) bool) {
		for _, r := range runs {
			if !yield(r) {
				return
			}
		}
	}, 1000); err != nil {
		t.Fatal(err)
	}
	p, err := plant.Open(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	if err := p.AddStation(ctx, plant.Station{Name: "L1-S1", Line: "L1"}); err != nil {
		t.Fatal(err)
	}
	if err := (&plant.Forwarder{Log: log, Plant: p, Station: "L1-S1"}).Drain(ctx); err != nil {
		t.Fatal(err)
	}
	if _, err := p.LastBaseline(ctx, "QM-205"); !errors.Is(err, store.ErrNotFound) || !errors.Is(err, plant.ErrNotFound) {
		t.Fatalf("plant baseline before any: %v, want not found", err)
	}

	drift := func(db, by string) Report {
		t.Helper()
		rep, err := Run(ctx, Options{DB: db, Variant: "QM-205", By: by, Chart: "watch", Baseline: DefaultBaseline, Alarms: 0,
			LSL: 25, USL: 34, UncertaintyGiven: true, UncertaintyPF: 0.3, Filter: store.Filter{}})
		if err != nil {
			t.Fatalf("drift on %s by %q: %v", db, by, err)
		}
		return rep
	}
	// The station approves units 1–250 (before the step); the plant has
	// none yet: it charts against a provisional baseline and says so.
	since, until := t0.Format(time.RFC3339Nano), t0.Add(250*4*time.Second).Format(time.RFC3339Nano)
	now := t0.Add(24 * time.Hour)
	sb, err := SetBaseline(ctx, BaselineRequest{DB: path, Variant: "QM-205", Since: since, Until: until, Name: "laminate A", Approver: "qe"}, now)
	if err != nil {
		t.Fatal(err)
	}
	if g := drift(url, "").Groups[0]; g.Baseline.Kind != "provisional" || g.Baseline.Approved != nil {
		t.Errorf("plant without an approved baseline: %+v", g.Baseline)
	}
	if g := drift(path, "").Groups[0]; g.Baseline.Kind != "approved" {
		t.Errorf("shift log with an approved baseline: %+v", g.Baseline)
	}
	pb, err := SetBaseline(ctx, BaselineRequest{DB: url, Variant: "QM-205", Since: since, Until: until, Name: "laminate A", Approver: "qe"}, now)
	if err != nil {
		t.Fatal(err)
	}
	show, err := ShowBaseline(ctx, url, "QM-205")
	if err != nil {
		t.Fatal(err)
	}
	sb.ID, pb.ID, show.ID = 0, 0, 0
	for _, b := range []*store.Baseline{&sb, &pb, &show} {
		b.Since, b.Until, b.ApprovedAt = b.Since.UTC(), b.Until.UTC(), b.ApprovedAt.UTC()
	}
	if !reflect.DeepEqual(sb, pb) || !reflect.DeepEqual(pb, show) {
		t.Fatalf("approved baselines differ:\nshift log %+v\nplant     %+v\nshown     %+v", sb, pb, show)
	}
	// The window holds the passed units among the first 250 runs.
	if sb.N < MinApproved || sb.N >= 250 || math.Abs(sb.Centre-29.8) > 0.1 || math.Abs(sb.Sigma-0.3) > 0.06 {
		t.Errorf("baseline n %d, centre %.3f, σ %.3f: want < 250 points near 29.8 and 0.3", sb.N, sb.Centre, sb.Sigma)
	}

	for _, by := range []string{"", "station"} {
		a, b := drift(path, by), drift(url, by)
		if a.Verdict == "" || a.Verdict != b.Verdict || len(a.Groups) != len(b.Groups) {
			t.Fatalf("by %q: verdict\nshift log:   %s (%d groups)\nplant store: %s (%d groups)", by, a.Verdict, len(a.Groups), b.Verdict, len(b.Groups))
		}
		for i := range a.Groups {
			ga, gb := a.Groups[i], b.Groups[i]
			if ga.Baseline.Kind != "approved" || gb.Baseline.Kind != "approved" || ga.Baseline.Text != gb.Baseline.Text {
				t.Errorf("by %q: baselines\n%+v\n%+v", by, ga.Baseline, gb.Baseline)
			}
			if ga.AlarmCount == 0 || !reflect.DeepEqual(ga.Charts, gb.Charts) || !reflect.DeepEqual(ga.Alarms, gb.Alarms) ||
				ga.AlarmCount != gb.AlarmCount || !reflect.DeepEqual(ga.Verdict, gb.Verdict) {
				t.Errorf("by %q group %q: charts or alarms differ:\nshift log %d alarms %+v\nplant     %d alarms %+v", by, ga.Key, ga.AlarmCount, ga.Charts, gb.AlarmCount, gb.Charts)
			}
			if !reflect.DeepEqual(ga.Capability, gb.Capability) || !reflect.DeepEqual(ga.Yield, gb.Yield) || ga.Runs != gb.Runs || ga.Yield == nil {
				t.Errorf("by %q group %q: capability or yield differ:\n%+v %+v\n%+v %+v", by, ga.Key, ga.Capability, ga.Yield, gb.Capability, gb.Yield)
			}
			// The charts use the approved centre and σ, not the
			// first 50 points'.
			if c := ga.Charts[0]; c.Target != Num(sb.Centre) || c.Sigma != Num(sb.Sigma) {
				t.Errorf("by %q: chart target %v σ %v, approved %v %v", by, c.Target, c.Sigma, sb.Centre, sb.Sigma)
			}
		}
		t.Logf("by %q: %s; %d alarms, yield %d of %d", by, a.Verdict, a.Groups[0].AlarmCount, a.Groups[0].Yield.Pass, a.Groups[0].Yield.Total)
	}
	// --last-approved on the plant takes the last baseline's window again
	// (the plant keeps no limits versions): the same units.
	again, err := SetBaseline(ctx, BaselineRequest{DB: url, Variant: "QM-205", LastApproved: true, Approver: "qe2"}, now)
	if err != nil {
		t.Fatal(err)
	}
	if again.Name != "laminate A" || again.N != pb.N || again.Centre != pb.Centre || again.Sigma != pb.Sigma {
		t.Errorf("--last-approved on the plant: %+v, want the window of %+v", again, pb)
	}
}

// 'drift baseline show' tells to set a baseline only when there is none:
// on a plant schema that predates the baselines table it names 'padline
// plant init' alone (it used to add "set one" after that).
func TestShowBaselineSaysWhatIsMissing(t *testing.T) {
	url := plantSchema(t)
	ctx := context.Background()
	if _, err := ShowBaseline(ctx, url, "QM-205"); err == nil || !strings.Contains(err.Error(), "set one with") {
		t.Fatalf("no baseline yet: %v", err)
	}
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	if _, err := conn.Exec(ctx, "DROP TABLE drift_baselines"); err != nil {
		t.Fatal(err)
	}
	if _, err := ShowBaseline(ctx, url, "QM-205"); err == nil || !strings.Contains(err.Error(), "padline plant init") || strings.Contains(err.Error(), "set one with") {
		t.Fatalf("schema without the baselines table: %v", err)
	}
}
