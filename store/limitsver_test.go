package store_test

import (
	"context"
	"errors"
	"testing"
	"time"

	"padline/store"
)

func TestLimitsVersions(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	if _, err := db.LatestLimitsVersion(ctx, "L2-S1", "FX-07", "QM-205"); !errors.Is(err, store.ErrNotFound) {
		t.Fatalf("latest of a new log: %v, want ErrNotFound", err)
	}
	v := store.LimitsVersion{Station: "L2-S1", Fixture: "FX-07", Variant: "QM-205", Created: t0, Cause: "first use",
		VariantHash: "abc", UPF: 0.3, USource: "stand-in", LowPF: 10.3, HighPF: 59.7, Status: store.LimitsPending}
	id, err := db.AddLimitsVersion(ctx, v)
	if err != nil {
		t.Fatal(err)
	}
	bad := v
	bad.HighPF = 5
	if _, err := db.AddLimitsVersion(ctx, bad); !errors.Is(err, store.ErrInvalidRecord) {
		t.Errorf("limits high below low: %v, want ErrInvalidRecord", err)
	}
	if err := db.DecideLimitsVersion(ctx, id, store.LimitsApproved, "", "why", t0); !errors.Is(err, store.ErrInvalidRecord) {
		t.Errorf("approval without a name: %v", err)
	}
	if err := db.DecideLimitsVersion(ctx, id, store.LimitsApproved, "ana", "study 3 looked right", t0.Add(time.Hour)); err != nil {
		t.Fatal(err)
	}
	if err := db.DecideLimitsVersion(ctx, id, store.LimitsRejected, "bo", "second thoughts", t0.Add(2*time.Hour)); !errors.Is(err, store.ErrDecided) {
		t.Errorf("deciding twice: %v, want ErrDecided", err)
	}
	if err := db.DecideLimitsVersion(ctx, id+7, store.LimitsApproved, "ana", "x", t0); !errors.Is(err, store.ErrNotFound) {
		t.Errorf("unknown id: %v, want ErrNotFound", err)
	}
	got, err := db.LatestLimitsVersion(ctx, "L2-S1", "FX-07", "QM-205")
	if err != nil || got.ID != id || got.Status != store.LimitsApproved || got.ApprovedBy != "ana" || got.Reason != "study 3 looked right" ||
		!got.Decided.Equal(t0.Add(time.Hour)) || !got.Created.Equal(t0) || got.UPF != 0.3 || got.HighPF != 59.7 {
		t.Errorf("latest: %+v, %v", got, err)
	}
	w := v
	w.Variant = "QM-212"
	if _, err := db.AddLimitsVersion(ctx, w); err != nil {
		t.Fatal(err)
	}
	if vs, err := db.LimitsVersions(ctx, "", "", "", store.LimitsPending); err != nil || len(vs) != 1 || vs[0].Variant != "QM-212" {
		t.Errorf("pending: %+v, %v", vs, err)
	}
	if vs, err := db.LimitsVersions(ctx, "L2-S1", "", "", ""); err != nil || len(vs) != 2 || vs[0].ID != id {
		t.Errorf("all of the station: %+v, %v", vs, err)
	}
}
