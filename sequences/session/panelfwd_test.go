package session_test

import (
	"context"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/jackc/pgx/v5"

	"padline/sequences/session"
	"padline/store"
	"padline/store/plant"
)

// A panel station forwards like a single-unit one: every site's committed
// run reaches the plant store once, with its site, serial and
// measurements, through the shift log's outbox, across two runs of the
// station (the second starts from the cursor the first left). An x-out
// has no run, here or there. Needs the test PostgreSQL server.
func TestRunPanelForwarded(t *testing.T) {
	ctx := context.Background()
	url := plantSchema(t)
	st, err := session.LoadStation("demo-panel")
	if err != nil {
		t.Fatal(err)
	}
	p, err := plant.Open(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer p.Close()
	if err := p.AddStation(ctx, plant.Station{Name: st.Name}); err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "shift.db")
	if rep, _, err := session.StationCheck(ctx, "QM-205", "demo-panel", path, session.RigOptions{}, nil); err != nil || !rep.OK {
		t.Fatalf("check %+v: %v", rep, err)
	}
	var warn strings.Builder
	o := session.Options{Variant: "QM-205", Station: "demo-panel", ShiftLog: path, Operator: "t", PlantURL: url, Warn: &warn}
	for _, in := range []string{"QM205-0001\nQM205-0002 x:3\n", "QM205-0003 x:1,8\n"} {
		var view panelLog
		if err := session.RunPanel(ctx, o, session.LineScanner(strings.NewReader(in)), &view); err != nil {
			t.Fatal(err)
		}
		if view.ended != strings.Count(in, "\n") {
			t.Fatalf("tested %d panels of %q", view.ended, in)
		}
	}
	if warn.Len() > 0 {
		t.Errorf("warnings: %s", warn.String())
	}

	db, err := store.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	var local []*store.Entry
	for e, err := range db.Runs(ctx, store.Filter{}) {
		if err != nil {
			t.Fatal(err)
		}
		local = append(local, e)
	}
	if len(local) != 8+7+6 {
		t.Fatalf("shift log holds %d runs, want 21 (3 panels of 8 sites, 3 x-outs)", len(local))
	}
	ob, err := db.OutboxState(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if ob.BacklogRuns != 0 || ob.Forwarded != int64(len(local)) || ob.LastError != "" {
		t.Errorf("outbox after the runs: %+v, want no backlog and %d forwarded", ob, len(local))
	}

	// The plant's rows, read as they are stored.
	type row struct {
		serial, site string
		n, meas      int
	}
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	rows, err := conn.Query(ctx, `SELECT r.local_id, r.serial, r.site, count(*) OVER (PARTITION BY r.local_id),
		(SELECT count(*) FROM measurements m WHERE m.log_id = r.log_id AND m.local_id = r.local_id)
		FROM runs r JOIN stations s ON s.id = r.station_id WHERE s.name = $1`, st.Name)
	if err != nil {
		t.Fatal(err)
	}
	got := map[int64]row{}
	for rows.Next() {
		var (
			id int64
			r  row
		)
		if err := rows.Scan(&id, &r.serial, &r.site, &r.n, &r.meas); err != nil {
			t.Fatal(err)
		}
		got[id] = r
	}
	if err := rows.Err(); err != nil {
		t.Fatal(err)
	}
	if len(got) != len(local) {
		t.Errorf("plant store holds %d runs of %s, the shift log %d", len(got), st.Name, len(local))
	}
	sites := map[int]int{}
	for _, e := range local {
		r, ok := got[e.ID]
		want := row{serial: e.Serial, site: strconv.Itoa(e.Site), n: 1, meas: len(e.Measurements)}
		if !ok || r != want {
			t.Errorf("run %d (panel %s site %d): plant has %+v (found %v), want %+v", e.ID, e.Panel, e.Site, r, ok, want)
		}
		if e.Site < 1 || e.Panel == "" || len(e.Measurements) == 0 {
			t.Errorf("run %d: site %d panel %q, %d measurements", e.ID, e.Site, e.Panel, len(e.Measurements))
		}
		sites[e.Site]++
	}
	// Site 3 was an x-out on the second panel, sites 1 and 8 on the third.
	if sites[1] != 2 || sites[3] != 2 || sites[8] != 2 || sites[2] != 3 {
		t.Errorf("runs per site %v", sites)
	}
}
