package session_test

import (
	"context"
	"errors"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"padline/sequences/session"
	"padline/store"
)

// seedLimits puts an approved limits version with another U into a new
// shift log, so the session's own limits are a pending change.
func seedLimits(t *testing.T, path string) {
	t.Helper()
	v, err := session.LoadVariant("QM-205")
	if err != nil {
		t.Fatal(err)
	}
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if _, err := db.AddLimitsVersion(context.Background(), store.LimitsVersion{Station: "L2-S1", Fixture: "FX-07", Variant: "QM-205",
		Created: time.Now(), Cause: "seed", VariantHash: v.Source.Hash, UPF: 0.25, USource: "seed", LowPF: 10.25, HighPF: 59.75,
		Status: store.LimitsApproved, ApprovedBy: "test", Decided: time.Now(), Reason: "seed"}); err != nil {
		t.Fatal(err)
	}
}

// Pending limits refuse the station (exit 3 in the terminal) with the
// version and how to approve it; with WaitForCheck (the station screen)
// the session waits and tests the unit once another process approves.
func TestGateRefusesPendingLimits(t *testing.T) {
	path := filepath.Join(t.TempDir(), "shift.db")
	seedLimits(t, path)
	s := checkedDemo(t, session.Options{ShiftLog: path})
	err := s.Run(context.Background(), session.OneSerial("QM205-000001"))
	if !errors.Is(err, session.ErrNotReady) || !errors.Is(err, session.ErrLimitsPending) ||
		!strings.Contains(err.Error(), "limits version 2 of QM-205") || !strings.Contains(err.Error(), "guard band U 0.250 → 0.300 pF") ||
		!strings.Contains(err.Error(), "padline limits approve 2") {
		t.Fatalf("Run = %v", err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}

	w := checkedDemo(t, session.Options{ShiftLog: path, WaitForCheck: true})
	ch, _ := w.Subscribe(256)
	done := make(chan error, 1)
	go func() { done <- w.Run(context.Background(), session.OneSerial("QM205-000001")) }()
	for e := range ch {
		if e.Kind == session.KindStationRefused {
			break
		}
		if e.Kind == session.KindVerdictCommitted {
			t.Fatal("a unit was tested against pending limits")
		}
	}
	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if _, err := session.DecideLimits(context.Background(), db, 2, true, "ana", "study at bring-up", time.Now()); err != nil {
		t.Fatal(err)
	}
	select {
	case err := <-done:
		if err != nil {
			t.Fatalf("Run after the approval: %v", err)
		}
	case <-time.After(2 * time.Minute):
		t.Fatal("the session did not start after the approval")
	}
}
