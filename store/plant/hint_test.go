package plant_test

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"padline/store/plant"
)

// Hint names what to do about each setup fault of README "The plant store"
// on one line, as the server and the driver word them; other errors pass
// unchanged.
func TestHintText(t *testing.T) {
	refused := "put batch of L2-S2: failed to connect to `user=s2 database=plant`:\n\t127.0.0.1:5999 (127.0.0.1): dial error: dial tcp 127.0.0.1:5999: connect: connection refused\n\t127.0.0.1:5999 (127.0.0.1): dial error: dial tcp 127.0.0.1:5999: connect: connection refused"
	for _, c := range []struct{ msg, want string }{
		{refused, "nothing answers at the plant URL's host and port"},
		{`failed to connect to ` + "`user=x database=nope`" + `: 127.0.0.1:5432 (127.0.0.1): server error: FATAL: database "nope" does not exist (SQLSTATE 3D000)`, "createdb -O OWNER"},
		{`server error: FATAL: role "nosuch" does not exist (SQLSTATE 28000)`, "add-reader ROLE' a reader's"},
		{`server error: FATAL: no pg_hba.conf entry for host "10.0.0.9", user "s1", database "plant" (SQLSTATE 28000)`, "pg_hba.conf lets that role in from nowhere"},
		{`FATAL: password authentication failed for user "s1" (SQLSTATE 28P01)`, "ALTER ROLE … PASSWORD"},
		{`add station L2-S1: role s1: ERROR: permission denied to create role (SQLSTATE 42501)`, "ALTER ROLE it CREATEROLE"},
		{`shift log 9b90: ERROR: new row violates row-level security policy for table "logs" (SQLSTATE 42501)`, "'padline plant stations' lists them"},
		{`month partition: ERROR: permission denied for function plant_ensure_month (SQLSTATE 42501)`, "a station forwards as its add-station role"},
		{`set plant baseline x (table drift_baselines): ERROR: cannot execute INSERT in a read-only transaction (SQLSTATE 25006)`, "read-only (an add-reader role)"},
		{`stations: ERROR: relation "stations" does not exist (SQLSTATE 42P01)`, "run 'padline plant init"},
		{`month partition: ERROR: function plant_ensure_month(unknown) does not exist (SQLSTATE 42883)`, "run 'padline plant init"},
		{`put batch of L2-S1: error preprocessing batch (prepare): ERROR: column "panel" of relation "runs" does not exist (SQLSTATE 42703)`, "older than this padline: run 'padline plant init"},
	} {
		got := plant.HintText(c.msg)
		if !strings.Contains(got, " — what to do: ") || !strings.Contains(got, c.want) || strings.Contains(got, "\n") {
			t.Errorf("HintText(%q) = %q, want one line with %q", c.msg, got, c.want)
		}
	}
	if got := plant.HintText(refused); strings.Count(got, "connection refused") != 1 { // the two addresses' line once
		t.Errorf("repeated lines kept: %q", got)
	}
	// A message that already says to run init gets no second remedy.
	own := `relation "drift_baselines" does not exist (SQLSTATE 42P01) (the plant schema predates approved baselines: run 'padline plant init --db URL' as its owner)`
	if got := plant.HintText(own); got != own {
		t.Errorf("HintText added to a message that names its remedy: %q", got)
	}

	pe := &pgconn.PgError{Severity: "ERROR", Code: "42501", Message: "permission denied to create role"}
	err := fmt.Errorf("plant add-station: %w", pe)
	h := plant.Hint(err)
	if !strings.Contains(h.Error(), "CREATEROLE") || !errors.Is(h, pe) {
		t.Errorf("Hint(%v) = %v (wraps the PgError: %v)", err, h, errors.Is(h, pe))
	}
	plain := errors.New("station not ready: connection refused by nobody (SQLSTATE 42501)")
	if plant.Hint(plain) != plain {
		t.Errorf("Hint changed an error that is no PostgreSQL error: %v", plant.Hint(plain))
	}
	if plant.Hint(nil) != nil {
		t.Error("Hint(nil) is not nil")
	}
}

// The faults as a real server and dial give them: nothing listening, an
// unknown role, another station's role, a reader that tries to write.
func TestHintOnServer(t *testing.T) {
	ctx := context.Background()
	dctx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	if _, err := plant.OpenMigrated(dctx, "postgres://nobody@127.0.0.1:1/plant?connect_timeout=5"); err == nil {
		t.Fatal("a plant store at port 1 answered")
	} else if h := plant.Hint(err).Error(); !strings.Contains(h, "nothing answers") || strings.Contains(h, "\n") {
		t.Errorf("port 1: %q", h)
	}

	url, schema := newSchema(t, baseURL())
	p := openPlant(t, url)
	register(t, p, plant.Station{Name: "S1", Line: "L1", Role: schema + "_s1"})
	register(t, p, plant.Station{Name: "S2", Line: "L1", Role: schema + "_s2"})
	if err := p.AddReader(ctx, schema+"_board"); err != nil {
		t.Fatal(err)
	}
	if _, err := plant.OpenMigrated(ctx, asRole(url, schema+"_nosuch")); err == nil {
		t.Fatal("an unknown role connected")
	} else if h := plant.Hint(err).Error(); !strings.Contains(h, "is no role on that server") {
		t.Errorf("unknown role: %q", h)
	}
	// S2's log forwarded as S1's role: the row-level policy refuses it.
	log := stationLog(t, tempLog(t, "s2"), "S2", 3, time.Date(2026, 11, 20, 6, 0, 0, 0, time.UTC), 1)
	as1 := openPlant(t, asRole(url, schema+"_s1"))
	if err := (&plant.Forwarder{Log: log, Plant: as1, Station: "S2"}).Drain(ctx); err == nil {
		t.Fatal("S2's runs landed under S1's role")
	} else if h := plant.Hint(err).Error(); !strings.Contains(h, "is not this station's") {
		t.Errorf("another station's role: %q", h)
	}
	board := openPlant(t, asRole(url, schema+"_board"))
	if err := (&plant.Forwarder{Log: log, Plant: board, Station: "S2"}).Drain(ctx); err == nil {
		t.Fatal("S2's runs landed under the reader role")
	} else if h := plant.Hint(err).Error(); !strings.Contains(h, "use the role made for the job") {
		t.Errorf("reader forwarding: %q", h)
	}
}

// A schema older than the program is named with the command that updates
// it, and the line board's reader refuses a database without the plant
// schema instead of serving a page of errors.
func TestDescribeAndReaderOnOldSchema(t *testing.T) {
	ctx := context.Background()
	url, schema := newSchema(t, baseURL())
	p := openPlant(t, url)
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)
	if d := p.Describe(ctx); !strings.Contains(d, fmt.Sprintf("schema version %d", plant.SchemaVersion())) || strings.Contains(d, "plant init") {
		t.Errorf("current schema: %q", d)
	}
	if _, err := conn.Exec(ctx, `UPDATE plant_schema SET version = version - 1`); err != nil {
		t.Fatal(err)
	}
	if d := p.Describe(ctx); !strings.Contains(d, fmt.Sprintf("schema version %d; this padline knows %d: run 'padline plant init'", plant.SchemaVersion()-1, plant.SchemaVersion())) {
		t.Errorf("older schema: %q", d)
	}
	if err := p.AddReader(ctx, schema+"_board"); err != nil {
		t.Fatal(err)
	}
	// Readers refuse it: their queries name what the last migration adds.
	if r, err := plant.OpenMigrated(ctx, url); err == nil {
		r.Close()
		t.Error("OpenMigrated accepted a schema older than the program")
	} else if !strings.Contains(err.Error(), "run 'padline plant init") {
		t.Errorf("OpenMigrated on an older schema: %v", err)
	}
	if r, err := plant.OpenReader(ctx, asRole(url, schema+"_board")); err == nil {
		r.Close()
		t.Error("OpenReader accepted a schema older than the program")
	} else if !strings.Contains(err.Error(), fmt.Sprintf("plant schema at version %d, this padline reads version %d", plant.SchemaVersion()-1, plant.SchemaVersion())) {
		t.Errorf("OpenReader on an older schema: %v", err)
	}
	if _, err := conn.Exec(ctx, `DROP TABLE plant_schema`); err != nil {
		t.Fatal(err)
	}
	if r, err := plant.OpenReader(ctx, asRole(url, schema+"_board")); err == nil {
		r.Close()
		t.Error("OpenReader accepted a database without the plant schema")
	} else if !strings.Contains(err.Error(), "no plant schema here (run 'padline plant init") {
		t.Errorf("OpenReader without the plant schema: %v", err)
	}
}

// 'plant status' says when no plant store is set, and what to do about a
// last error it knows.
func TestStatusTextNamesWhatToDo(t *testing.T) {
	at := time.Date(2026, 12, 2, 18, 25, 0, 0, time.UTC)
	var b strings.Builder
	s := plant.Status{ShiftLog: "s.db", LastTime: &at, LastError: "x (SQLSTATE 28P01)", LastErrorTime: &at, LastErrorFix: "check the password"}
	if err := s.Write(&b, false); err != nil {
		t.Fatal(err)
	}
	if out := b.String(); !strings.Contains(out, "plant store   none set (station file plant.url, or $PADLINE_PLANT_URL)") || !strings.Contains(out, "what to do    check the password") || !strings.Contains(out, "no runs forwarded yet") {
		t.Errorf("status text:\n%s", out)
	}
}
