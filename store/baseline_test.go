package store_test

import (
	"context"
	"errors"
	"testing"
	"time"

	"padline/store"
)

func TestBaselines(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	if _, err := db.LastBaseline(ctx, "QM-205"); !errors.Is(err, store.ErrNotFound) {
		t.Fatalf("LastBaseline of a new log: %v, want ErrNotFound", err)
	}
	b := store.Baseline{Variant: "QM-205", Name: "laminate A", Centre: 30.1, Sigma: 4.3, N: 400, Method: "mean, MR̄/d2",
		Since: t0, Until: t0.Add(8 * time.Hour), FirstSerial: "QM205-000001", LastSerial: "QM205-000400",
		ApprovedBy: "ana", ApprovedAt: t0.Add(9 * time.Hour)}
	if _, err := db.SetBaseline(ctx, b); err != nil {
		t.Fatal(err)
	}
	// A later approval wins even when stamped earlier (a wrong clock);
	// another variant's does not count.
	c := b
	c.Name, c.Centre, c.ApprovedAt = "laminate B", 34, t0
	if _, err := db.SetBaseline(ctx, c); err != nil {
		t.Fatal(err)
	}
	o := b
	o.Variant, o.Name = "QM-206", "other"
	if _, err := db.SetBaseline(ctx, o); err != nil {
		t.Fatal(err)
	}
	got, err := db.LastBaseline(ctx, "QM-205")
	if err != nil || got.Name != "laminate B" || got.Centre != 34 || got.Sigma != 4.3 || got.N != 400 ||
		!got.Since.Equal(t0) || !got.Until.Equal(t0.Add(8*time.Hour)) || got.LastSerial != "QM205-000400" || got.ApprovedBy != "ana" {
		t.Errorf("LastBaseline = %+v, %v", got, err)
	}
	for _, bad := range []store.Baseline{
		{Variant: "QM-205", Name: "", Sigma: 1, N: 10},
		{Variant: "QM-205", Name: "x", Sigma: 0, N: 10},
		{Variant: "QM-205", Name: "x", Sigma: 1, N: 1},
		{Variant: "QM-205", Name: "x", Sigma: 1, N: 10, Since: t0, Until: t0.Add(-time.Second)},
	} {
		if _, err := db.SetBaseline(ctx, bad); !errors.Is(err, store.ErrInvalidRecord) {
			t.Errorf("SetBaseline(%+v) = %v, want ErrInvalidRecord", bad, err)
		}
	}
}

// A serial first tested on one station and then on another counts as a
// first unit in both groups under FirstInGroup, and only where it was
// first seen over the whole log without it.
func TestCountsFirstInGroup(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	hash := putDemo(t, db)
	for i := range 4 {
		r := demoRun(i, hash)
		r.Serial = "QM205-000001"
		r.Station = []string{"L2-S1", "L2-S1", "L3-S1", "L3-S1"}[i]
		if _, err := db.Record(ctx, r); err != nil {
			t.Fatal(err)
		}
	}
	whole, err := db.Counts(ctx, store.Filter{Station: "L3-S1"})
	if err != nil || whole.Runs != 2 || whole.FirstUnits != 0 {
		t.Errorf("whole-log first: %+v, %v", whole, err)
	}
	grp, err := db.Counts(ctx, store.Filter{Station: "L3-S1", FirstInGroup: true})
	if err != nil || grp.Runs != 2 || grp.FirstUnits != 1 {
		t.Errorf("first within the station: %+v, %v", grp, err)
	}
}
