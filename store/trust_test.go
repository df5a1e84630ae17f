package store_test

import (
	"context"
	"encoding/json"
	"errors"
	"path/filepath"
	"testing"
	"time"

	"padline/store"
)

func TestStationChecks(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	if _, err := db.LastCheck(ctx, "L2-S1", "FX-07"); !errors.Is(err, store.ErrNotFound) {
		t.Fatalf("LastCheck of a new log: %v, want ErrNotFound", err)
	}
	hash := putDemo(t, db)
	last, err := db.LastRunID(ctx)
	if err != nil || last != 0 {
		t.Fatalf("LastRunID of an empty log: %d, %v", last, err)
	}
	for i := range 3 {
		if _, err := db.Record(ctx, demoRun(i, hash)); err != nil {
			t.Fatal(err)
		}
	}
	last, err = db.LastRunID(ctx)
	if err != nil || last != 3 {
		t.Fatalf("LastRunID %d, %v; want 3", last, err)
	}
	checks := []store.StationCheck{
		{Time: t0, Station: "L2-S1", Fixture: "FX-07", StationHash: "aa", OK: true, LastRunID: last, Details: json.RawMessage(`{"refs":1}`)},
		{Time: t0.Add(time.Hour), Station: "L2-S1", Fixture: "FX-07", StationHash: "bb", OK: false, LastRunID: last, Details: json.RawMessage(`{"refs":2}`)},
		// Another fixture on the same station does not hide FX-07's latest.
		{Time: t0.Add(2 * time.Hour), Station: "L2-S1", Fixture: "FX-08", StationHash: "cc", OK: true, LastRunID: last, Details: json.RawMessage(`{}`)},
	}
	for _, c := range checks {
		if _, err := db.RecordCheck(ctx, c); err != nil {
			t.Fatal(err)
		}
	}
	got, err := db.LastCheck(ctx, "L2-S1", "FX-07")
	if err != nil {
		t.Fatal(err)
	}
	if got.OK || got.StationHash != "bb" || !got.Time.Equal(checks[1].Time) || got.LastRunID != 3 || string(got.Details) != `{"refs":2}` {
		t.Errorf("LastCheck = %+v, want the refused check at 07:00", got)
	}
	// Runs since the check: two more runs of FX-07 and one of another
	// fixture.
	for i := 3; i < 5; i++ {
		if _, err := db.Record(ctx, demoRun(i, hash)); err != nil {
			t.Fatal(err)
		}
	}
	other := demoRun(5, hash)
	other.Fixture = "FX-08"
	if _, err := db.Record(ctx, other); err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		fixture string
		since   int64
		want    int64
	}{{"FX-07", got.LastRunID, 2}, {"FX-08", got.LastRunID, 1}, {"FX-07", 0, 5}, {"FX-09", 0, 0}} {
		if n, err := db.RunsSince(ctx, "L2-S1", c.fixture, c.since); err != nil || n != c.want {
			t.Errorf("RunsSince(%s, %d) = %d, %v; want %d", c.fixture, c.since, n, err, c.want)
		}
	}

	for name, bad := range map[string]store.StationCheck{
		"no station":   {Time: t0, Fixture: "FX-07", StationHash: "aa", Details: json.RawMessage(`{}`)},
		"no time":      {Station: "L2-S1", Fixture: "FX-07", StationHash: "aa", Details: json.RawMessage(`{}`)},
		"no hash":      {Time: t0, Station: "L2-S1", Fixture: "FX-07", Details: json.RawMessage(`{}`)},
		"not JSON":     {Time: t0, Station: "L2-S1", Fixture: "FX-07", StationHash: "aa", Details: json.RawMessage(`{`)},
		"negative run": {Time: t0, Station: "L2-S1", Fixture: "FX-07", StationHash: "aa", LastRunID: -1, Details: json.RawMessage(`{}`)},
	} {
		if _, err := db.RecordCheck(ctx, bad); !errors.Is(err, store.ErrInvalidRecord) {
			t.Errorf("%s: RecordCheck %v, want ErrInvalidRecord", name, err)
		}
	}
}

func TestStudiesAndUncertainty(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	if _, err := db.LastStudy(ctx, "L2-S1", "FX-07", store.StudyType1); !errors.Is(err, store.ErrNotFound) {
		t.Fatalf("LastStudy of a new log: %v", err)
	}
	if _, err := db.LastUncertainty(ctx, "L2-S1", "FX-07"); !errors.Is(err, store.ErrNotFound) {
		t.Fatalf("LastUncertainty of a new log: %v", err)
	}
	studies := []store.Study{
		{Kind: store.StudyType1, Time: t0, Station: "L2-S1", Fixture: "FX-07", Results: json.RawMessage(`{"sd_pf":0.05}`)},
		{Kind: store.StudyGRR, Time: t0.Add(time.Minute), Station: "L2-S1", Fixture: "FX-07", Results: json.RawMessage(`{"pct_grr":1.5}`)},
		{Kind: store.StudyType1, Time: t0.Add(2 * time.Minute), Station: "L2-S1", Fixture: "FX-07", Results: json.RawMessage(`{"sd_pf":0.04}`)},
	}
	for _, s := range studies {
		if _, err := db.RecordStudy(ctx, s); err != nil {
			t.Fatal(err)
		}
	}
	for _, c := range []struct{ kind, want string }{
		{store.StudyType1, `{"sd_pf":0.04}`}, {store.StudyGRR, `{"pct_grr":1.5}`}, {"", `{"sd_pf":0.04}`},
	} {
		s, err := db.LastStudy(ctx, "L2-S1", "FX-07", c.kind)
		if err != nil || string(s.Results) != c.want {
			t.Errorf("LastStudy(%q) = %s, %v; want %s", c.kind, s.Results, err, c.want)
		}
	}
	if _, err := db.RecordStudy(ctx, store.Study{Kind: "anova", Time: t0, Station: "L2-S1", Fixture: "FX-07", Results: json.RawMessage(`{}`)}); !errors.Is(err, store.ErrInvalidRecord) {
		t.Errorf("unknown study kind: %v", err)
	}

	us := []store.Uncertainty{
		{Time: t0, Station: "L2-S1", Fixture: "FX-07", UPF: 0.4, UCPF: 0.2, Components: json.RawMessage(`[]`), Source: "first"},
		{Time: t0.Add(time.Hour), Station: "L2-S1", Fixture: "FX-07", UPF: 0.36, UCPF: 0.18, Components: json.RawMessage(`[{"name":"ladder resolution"}]`), Source: "type-1 study 2"},
	}
	for _, u := range us {
		if _, err := db.SaveUncertainty(ctx, u); err != nil {
			t.Fatal(err)
		}
	}
	u, err := db.LastUncertainty(ctx, "L2-S1", "FX-07")
	if err != nil || u.UPF != 0.36 || u.UCPF != 0.18 || u.Source != "type-1 study 2" || !u.Time.Equal(us[1].Time) ||
		string(u.Components) != `[{"name":"ladder resolution"}]` {
		t.Errorf("LastUncertainty = %+v, %v", u, err)
	}
	if _, err := db.SaveUncertainty(ctx, store.Uncertainty{Time: t0, Station: "L2-S1", Fixture: "FX-07", UPF: -1, Components: json.RawMessage(`[]`), Source: "x"}); !errors.Is(err, store.ErrInvalidRecord) {
		t.Errorf("negative U: %v", err)
	}
}

func TestTrustSurvivesReopen(t *testing.T) {
	ctx := context.Background()
	db, path := openTemp(t)
	c := store.StationCheck{Time: t0, Station: "L2-S1", Fixture: "FX-07", StationHash: "aa", OK: true, Details: json.RawMessage(`{}`)}
	if _, err := db.RecordCheck(ctx, c); err != nil {
		t.Fatal(err)
	}
	db.Close()
	again, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer again.Close()
	if got, err := again.LastCheck(ctx, "L2-S1", "FX-07"); err != nil || !got.OK {
		t.Errorf("check after reopen: %+v, %v", got, err)
	}
}

func TestMigrationFromVersion2(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "v2.db")
	old, err := store.OpenVersion(path, 2)
	if err != nil {
		t.Fatal(err)
	}
	hash := putDemo(t, old)
	if _, err := old.Record(ctx, demoRun(1, hash)); err != nil {
		t.Fatal(err)
	}
	if err := old.SaveRelayOps(ctx, "FX-07", []uint64{4, 5}); err != nil {
		t.Fatal(err)
	}
	c := store.StationCheck{Time: t0, Station: "L2-S1", Fixture: "FX-07", StationHash: "aa", OK: true, Details: json.RawMessage(`{}`)}
	if _, err := old.RecordCheck(ctx, c); err == nil {
		t.Fatal("station_checks exists at version 2; the upgrade test would prove nothing")
	}
	old.Close()

	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if v, _ := db.Version(ctx); v != store.SchemaVersion() || v < 3 {
		t.Errorf("upgraded to version %d, want %d (≥ 3)", v, store.SchemaVersion())
	}
	if ops, err := db.LoadRelayOps(ctx, "FX-07"); err != nil || len(ops) != 2 || ops[1] != 5 {
		t.Errorf("relay ops after upgrade: %v, %v", ops, err)
	}
	if n, err := db.RunsSince(ctx, "L2-S1", "FX-07", 0); err != nil || n != 1 {
		t.Errorf("runs after upgrade: %d, %v", n, err)
	}
	if _, err := db.RecordCheck(ctx, c); err != nil {
		t.Errorf("RecordCheck after upgrade: %v", err)
	}
}
