package plant_test

import (
	"context"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"padline/store"
	"padline/store/plant"
)

// The line board's role (AddReader) reads every station's rows past the
// row-level policies, and can write nothing: no INSERT, UPDATE, DELETE or
// TRUNCATE on any plant table, no call of the functions that write with
// their owner's rights, no new table. OpenReader refuses a role that may
// write, and a station's role is one.
func TestReaderCannotWrite(t *testing.T) {
	ctx := context.Background()
	url, schema := newSchema(t, baseURL())
	p := openPlant(t, url)
	role := schema + "_board"
	register(t, p, plant.Station{Name: "S1", Line: "L1", Role: schema + "_s1"})
	if err := p.AddReader(ctx, role); err != nil {
		t.Fatal(err)
	}
	if err := p.AddReader(ctx, role); err != nil { // again: idempotent
		t.Fatal(err)
	}
	log := stationLog(t, tempLog(t, "s1"), "S1", 30, time.Date(2026, 11, 20, 6, 0, 0, 0, time.UTC), 1)
	st := openPlant(t, asRole(url, schema+"_s1"))
	if err := (&plant.Forwarder{Log: log, Plant: st, Station: "S1"}).Drain(ctx); err != nil {
		t.Fatal(err)
	}

	r, err := plant.OpenReader(ctx, asRole(url, role))
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	if c, err := r.Counts(ctx, store.Filter{}); err != nil || c.Runs != 30 {
		t.Fatalf("reader counts %+v, %v: want the 30 runs", c, err)
	}
	if b, err := r.Board(ctx, "L1", time.Date(2026, 11, 20, 6, 0, 0, 0, time.UTC), time.Date(2026, 11, 20, 7, 0, 0, 0, time.UTC)); err != nil || len(b) != 1 {
		t.Fatalf("reader board %+v, %v", b, err)
	}

	conn, err := pgx.Connect(ctx, asRole(url, role))
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	for _, q := range []string{
		`INSERT INTO stations (name) VALUES ('forged')`,
		`UPDATE runs SET trip_pf = 1`,
		`DELETE FROM runs`,
		`TRUNCATE serial_first`,
		`INSERT INTO variants (name) VALUES ('QM-999')`,
		`SELECT plant_ensure_month(0)`,
		`SELECT plant_note_first('{x}', '{1}', '{1}', '{1}', '{1}', '{1}', '{1}', '{l}', '{""}', '{pass}')`,
		`CREATE TABLE mine (x int)`,
	} {
		// Past the read-only default too: the privileges must refuse it.
		if _, err := conn.Exec(ctx, "BEGIN READ WRITE; "+q+"; COMMIT"); err == nil {
			t.Errorf("the reader role ran %q", q)
		} else if !strings.Contains(err.Error(), "permission denied") && !strings.Contains(err.Error(), "42501") {
			t.Errorf("%q refused for another reason: %v", q, err)
		}
		conn.Exec(ctx, "ROLLBACK")
	}
	if c := countRuns(t, p, store.Filter{}); c != 30 {
		t.Fatalf("%d runs after the reader's attempts", c)
	}
	for _, who := range []string{"", schema + "_s1"} {
		u := url
		if who != "" {
			u = asRole(url, who)
		}
		if db, err := plant.OpenReader(ctx, u); err == nil {
			db.Close()
			t.Errorf("OpenReader accepted a role that may write (%q)", who)
		} else if !strings.Contains(err.Error(), "may write") {
			t.Errorf("OpenReader as %q: %v", who, err)
		}
	}
}
