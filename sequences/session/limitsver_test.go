package session

import (
	"context"
	"errors"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"padline/store"
)

// Every change of what runs judge against is a new version; only the first
// and, within the station's bound, a change of U alone approve themselves.
func TestSyncLimits(t *testing.T) {
	ctx := context.Background()
	db, err := store.Open(filepath.Join(t.TempDir(), "shift.db"))
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	st := &Station{Name: "L2-S1", Fixture: "FX-07", AutoApproveUPF: 0.05}
	now := time.Date(2026, 12, 2, 8, 0, 0, 0, time.UTC)
	ver := func(hash string, u, lo, hi float64) store.LimitsVersion {
		return store.LimitsVersion{Station: "L2-S1", Fixture: "FX-07", Variant: "QM-205", VariantHash: hash, UPF: u, USource: "shift log x", LowPF: lo, HighPF: hi}
	}
	steps := []struct {
		v             store.LimitsVersion
		id            int64
		status, cause string
	}{
		{ver("h1", 0.3, 10.3, 59.7), 1, store.LimitsApproved, "first use"},
		{ver("h1", 0.3, 10.3, 59.7), 1, store.LimitsApproved, "first use"}, // nothing changed: no new version
		{ver("h1", 0.39, 10.39, 59.61), 2, store.LimitsPending, "guard band U 0.300 → 0.390 pF (the station's study in the shift log)"},
		{ver("h1", 0.42, 10.42, 59.58), 3, store.LimitsApproved, "guard band U 0.390 → 0.420 pF"}, // within 0.05 pF: auto
		{ver("h2", 0.42, 11, 59.58), 4, store.LimitsPending, "variant file QM-205 changed (sha256 h1 → h2)"},
	}
	for i, s := range steps {
		got, err := syncLimits(ctx, db, s.v, st, now.Add(time.Duration(i)*time.Minute))
		if err != nil {
			t.Fatal(err)
		}
		if got.ID != s.id || got.Status != s.status || !strings.Contains(got.Cause, s.cause) {
			t.Errorf("step %d: version %d %s %q, want %d %s %q", i, got.ID, got.Status, got.Cause, s.id, s.status, s.cause)
		}
	}
	lv, _ := db.LatestLimitsVersion(ctx, "L2-S1", "FX-07", "QM-205")
	if err := limitsRefusal(lv); !errors.Is(err, ErrNotReady) || !errors.Is(err, ErrLimitsPending) || !strings.Contains(err.Error(), "limits version 4 of QM-205 (11.00 … 59.58 pF) awaits approval") {
		t.Errorf("refusal of a pending version: %v", err)
	}
	if _, err := DecideLimits(ctx, db, 4, false, "ana", "", now); err == nil {
		t.Error("a rejection without a reason was accepted")
	}
	lv, err = DecideLimits(ctx, db, 4, false, "ana", "spec window not signed off", now)
	if err != nil {
		t.Fatal(err)
	}
	if err := limitsRefusal(lv); !errors.Is(err, ErrLimitsPending) || !strings.Contains(err.Error(), "was rejected by ana: spec window not signed off") {
		t.Errorf("refusal of a rejected version: %v", err)
	}
}

// The limits commands: pending records the current limits first; approve
// needs who and why; diff compares two versions or two variants.
func TestDoLimits(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "shift.db")
	now := time.Date(2026, 12, 2, 8, 0, 0, 0, time.UTC)
	do := func(req LimitsRequest) (string, LimitsResult, error) {
		req.ShiftLog, req.Station = path, "demo-sim"
		res, err := DoLimits(ctx, req, now)
		var b strings.Builder
		res.Write(&b)
		return b.String(), res, err
	}
	if _, res, err := do(LimitsRequest{Action: "pending", Variant: "QM-205"}); err != nil || len(res.Versions) != 0 {
		t.Fatalf("pending on a new log (version 1 is approved on first use): %+v %v", res, err)
	}
	if _, _, err := do(LimitsRequest{Action: "approve", Args: []string{"1"}, By: "ana"}); err == nil || !strings.Contains(err.Error(), "--why") {
		t.Errorf("approve without --why: %v", err)
	}
	if _, _, err := do(LimitsRequest{Action: "approve", Args: []string{"one"}, By: "ana", Why: "x"}); err == nil || !strings.Contains(err.Error(), `"one" is not a limits version id`) {
		t.Errorf("approve of a word: %v", err)
	}
	out, res, err := do(LimitsRequest{Action: "diff", Args: []string{"QM-205", "QM-212"}})
	if err != nil || len(res.Versions) != 2 || !strings.Contains(out, "* high limit") || !strings.Contains(out, "limits of QM-205 → QM-212") {
		t.Errorf("diff of two variants: %v\n%s", err, out)
	}
	if out, _, err := do(LimitsRequest{Action: "diff", Args: []string{"1", "1"}}); err != nil || strings.Contains(out, "* ") {
		t.Errorf("diff of a version with itself: %v\n%s", err, out)
	}
}
