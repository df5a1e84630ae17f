package store_test

import (
	"context"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"padline/sequences"
	"padline/store"
)

// A panel's sites are runs of their own with panel and site; an x-out is
// logged as not tested and has no run.
func TestPanelRunsAndXOuts(t *testing.T) {
	ctx := context.Background()
	db, err := store.Open(filepath.Join(t.TempDir(), "shift.db"))
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	hash, err := db.PutVariant(ctx, "QM-205", []byte("name: QM-205\n"))
	if err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2026, 3, 3, 7, 0, 0, 0, time.UTC)
	for site := 1; site <= 3; site++ {
		r := &sequences.Run{Serial: "QM205-00010" + string(rune('0'+site)), Variant: "QM-205", ConfigHash: hash,
			Station: "L2-P1", Fixture: "PX-01", Finished: t0, Verdict: sequences.Pass, Panel: "QM205-0001", Site: site,
			Measurements: []sequences.Measurement{{Step: "trip_search", Name: "trip_pf", Value: 30 + float64(site), Unit: "pF", Verdict: sequences.Pass}}}
		if site == 2 {
			continue // the x-out
		}
		if _, err := db.Record(ctx, r); err != nil {
			t.Fatal(err)
		}
	}
	if err := db.RecordXOut(ctx, store.XOut{Time: t0, Panel: "QM205-0001", Site: 2, Serial: "QM205-000102",
		Variant: "QM-205", Station: "L2-P1", Fixture: "PX-01", Operator: "ana"}); err != nil {
		t.Fatal(err)
	}
	var sites []int
	for e, err := range db.Runs(ctx, store.Filter{Panel: "QM205-0001"}) {
		if err != nil {
			t.Fatal(err)
		}
		if e.Panel != "QM205-0001" {
			t.Fatalf("run %d panel %q", e.ID, e.Panel)
		}
		sites = append(sites, e.Site)
	}
	if len(sites) != 2 || sites[0] != 1 || sites[1] != 3 {
		t.Fatalf("sites with runs %v, want [1 3]", sites)
	}
	pts, err := db.TripSeries(ctx, store.Filter{Variant: "QM-205", Site: 3}, 0)
	if err != nil {
		t.Fatal(err)
	}
	if len(pts) != 1 || pts[0].Site != 3 || pts[0].TripPF != 33 {
		t.Fatalf("site 3 series %+v", pts)
	}
	xs, err := db.XOuts(ctx, "QM205-0001")
	if err != nil {
		t.Fatal(err)
	}
	if len(xs) != 1 || xs[0].Site != 2 || xs[0].Serial != "QM205-000102" {
		t.Fatalf("x-outs %+v", xs)
	}
	var csv strings.Builder
	if _, err := db.WriteCSV(ctx, &csv, store.Filter{Panel: "QM205-0001", Site: 3}); err != nil {
		t.Fatal(err)
	}
	if lines := strings.Split(strings.TrimSpace(csv.String()), "\n"); len(lines) != 2 || !strings.HasSuffix(lines[1], ",QM205-0001,3") {
		t.Fatalf("CSV of site 3:\n%s", csv.String())
	}
	// A site without its panel is refused.
	if _, err := db.Record(ctx, &sequences.Run{Serial: "X", Variant: "QM-205", ConfigHash: hash, Station: "s", Fixture: "f",
		Finished: t0, Verdict: sequences.Pass, Site: 4}); err == nil {
		t.Fatal("a site without a panel was recorded")
	}
}
