package store

import (
	"context"
	"database/sql"
	"encoding/json"
	"fmt"
	"time"

	"padline/sequences"
)

// This file is the plant outbox (migration 0005): what the forwarder reads
// from the shift log and the cursors it advances. The log itself is never
// changed by forwarding: runs stay the source of truth.

// Outbox is the forwarding state of the shift log.
type Outbox struct {
	// LogUUID names this shift log in the plant store (32 hex digits).
	LogUUID string
	// RunCursor, CheckCursor and StudyCursor are the highest ids already
	// forwarded to (or refused by) the plant store.
	RunCursor, CheckCursor, StudyCursor int64
	// Forwarded counts the runs the plant store accepted from this log.
	Forwarded int64
	// LastTime is when a batch last landed (zero: never).
	LastTime time.Time
	// LastError is the last forwarding error ("" after a batch lands) and
	// LastErrorTime when it happened.
	LastError     string
	LastErrorTime time.Time
	// Backlog counts runs, checks and studies not yet forwarded.
	BacklogRuns, BacklogChecks, BacklogStudies int64
	// Refused counts rows the plant store refused.
	Refused int64
}

// OutboxState returns the forwarding state, backlog included.
func (db *DB) OutboxState(ctx context.Context) (Outbox, error) {
	var (
		o           Outbox
		last, errAt sql.NullInt64
	)
	stmt, err := db.prepared(ctx, `
		SELECT o.log_uuid, o.run_cursor, o.check_cursor, o.study_cursor, o.forwarded,
		       o.last_time, o.last_error, o.last_error_time,
		       (SELECT count(*) FROM runs WHERE id > o.run_cursor),
		       (SELECT count(*) FROM station_checks WHERE id > o.check_cursor),
		       (SELECT count(*) FROM studies WHERE id > o.study_cursor),
		       (SELECT count(*) FROM plant_refused)
		FROM plant_outbox o WHERE o.id = 1`)
	if err != nil {
		return o, fmt.Errorf("outbox state: %w", err)
	}
	err = stmt.QueryRowContext(ctx).Scan(&o.LogUUID, &o.RunCursor, &o.CheckCursor, &o.StudyCursor,
		&o.Forwarded, &last, &o.LastError, &errAt, &o.BacklogRuns, &o.BacklogChecks, &o.BacklogStudies, &o.Refused)
	if err != nil {
		return o, fmt.Errorf("outbox state: %w", err)
	}
	if last.Valid {
		o.LastTime = time.Unix(0, last.Int64).UTC()
	}
	if errAt.Valid {
		o.LastErrorTime = time.Unix(0, errAt.Int64).UTC()
	}
	return o, nil
}

// PendingRuns returns up to limit runs with an id above after, in id
// order, each with its measurements; Entry.ID is the run's id in this log.
// It reads the runs with one query and their measurements with another,
// rather than one joined row per measurement that repeats the run's
// columns: a catch-up reads thousands of runs a second. The two need no
// common snapshot: a run and its measurements are committed together
// (Writer.Record) and never changed after.
func (db *DB) PendingRuns(ctx context.Context, after int64, limit int) ([]*Entry, error) {
	rs, err := db.prepared(ctx, pendingRunsSQL)
	if err != nil {
		return nil, fmt.Errorf("pending runs: %w", err)
	}
	ms, err := db.prepared(ctx, pendingMeasurementsSQL)
	if err != nil {
		return nil, fmt.Errorf("pending runs: %w", err)
	}
	rows, err := rs.QueryContext(ctx, after, limit)
	if err != nil {
		return nil, fmt.Errorf("pending runs: %w", err)
	}
	defer rows.Close()
	var out []*Entry
	for rows.Next() {
		var r runCols
		if err := rows.Scan(r.dest()...); err != nil {
			return nil, fmt.Errorf("pending runs: %w", err)
		}
		out = append(out, r.entry())
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("pending runs: %w", err)
	}
	if len(out) == 0 {
		return nil, nil
	}
	mrows, err := ms.QueryContext(ctx, after, out[len(out)-1].ID)
	if err != nil {
		return nil, fmt.Errorf("pending runs: measurements: %w", err)
	}
	defer mrows.Close()
	i := 0
	for mrows.Next() {
		var (
			id                        int64
			step, name, unit, verdict string
			value, low, high          sql.NullFloat64
		)
		if err := mrows.Scan(&id, &step, &name, &unit, &value, &low, &high, &verdict); err != nil {
			return nil, fmt.Errorf("pending runs: measurements: %w", err)
		}
		for i < len(out) && out[i].ID < id {
			i++
		}
		if i == len(out) || out[i].ID != id {
			return nil, fmt.Errorf("pending runs: measurement of run %d, which is not in the log", id)
		}
		out[i].Measurements = append(out[i].Measurements, sequences.Measurement{
			Step: sequences.StepName(step), Name: sequences.Quantity(name), Unit: unit,
			Value: orNaN(value), Low: orNaN(low), High: orNaN(high), Verdict: sequences.Verdict(verdict),
		})
	}
	if err := mrows.Err(); err != nil {
		return nil, fmt.Errorf("pending runs: measurements: %w", err)
	}
	return out, nil
}

const pendingRunsSQL = `
SELECT r.id, r.serial, v.name, c.hash, s.name, fx.name, r.operator, r.lot, r.software,
       r.started, r.finished, r.verdict, r.fail_code, r.trip_pf, r.driver, r.fault, r.panel, r.site
FROM runs r
CROSS JOIN variants v ON v.id = r.variant_id
CROSS JOIN configs c ON c.id = r.config_id
CROSS JOIN stations s ON s.id = r.station_id
CROSS JOIN fixtures fx ON fx.id = r.fixture_id
WHERE r.id > ? ORDER BY r.id LIMIT ?`

// pendingMeasurementsSQL reads the measurements of the runs with ids in
// (after, last], in run and recorded order.
const pendingMeasurementsSQL = `
SELECT m.run_id, q.step, q.name, q.unit, m.value, m.low, m.high, m.verdict
FROM measurements m CROSS JOIN quantities q ON q.id = m.quantity_id
WHERE m.run_id > ? AND m.run_id <= ? ORDER BY m.run_id, m.seq`

// PendingChecks returns up to limit station checks with an id above after.
func (db *DB) PendingChecks(ctx context.Context, after int64, limit int) ([]StationCheck, error) {
	rows, err := db.sql.QueryContext(ctx, `
		SELECT c.id, c.time, s.name, f.name, c.station_hash, c.ok, c.last_run_id, c.details
		FROM station_checks c JOIN stations s ON s.id = c.station_id JOIN fixtures f ON f.id = c.fixture_id
		WHERE c.id > ? ORDER BY c.id LIMIT ?`, after, limit)
	if err != nil {
		return nil, fmt.Errorf("pending checks: %w", err)
	}
	defer rows.Close()
	var out []StationCheck
	for rows.Next() {
		var (
			c       StationCheck
			t       int64
			ok      int
			details string
		)
		if err := rows.Scan(&c.ID, &t, &c.Station, &c.Fixture, &c.StationHash, &ok, &c.LastRunID, &details); err != nil {
			return nil, fmt.Errorf("pending checks: %w", err)
		}
		c.Time, c.OK, c.Details = time.Unix(0, t).UTC(), ok == 1, json.RawMessage(details)
		out = append(out, c)
	}
	return out, rows.Err()
}

// PendingStudies returns up to limit studies with an id above after.
func (db *DB) PendingStudies(ctx context.Context, after int64, limit int) ([]Study, error) {
	rows, err := db.sql.QueryContext(ctx, `
		SELECT x.id, x.kind, x.time, s.name, f.name, x.results
		FROM studies x JOIN stations s ON s.id = x.station_id JOIN fixtures f ON f.id = x.fixture_id
		WHERE x.id > ? ORDER BY x.id LIMIT ?`, after, limit)
	if err != nil {
		return nil, fmt.Errorf("pending studies: %w", err)
	}
	defer rows.Close()
	var out []Study
	for rows.Next() {
		var (
			s       Study
			t       int64
			results string
		)
		if err := rows.Scan(&s.ID, &s.Kind, &t, &s.Station, &s.Fixture, &results); err != nil {
			return nil, fmt.Errorf("pending studies: %w", err)
		}
		s.Time, s.Results = time.Unix(0, t).UTC(), json.RawMessage(results)
		out = append(out, s)
	}
	return out, rows.Err()
}

// RelayCount is one rung's persisted relay operation count.
type RelayCount struct {
	Fixture string
	Rung    int
	Count   uint64
}

// RelayCounts returns every persisted relay count of the log.
func (db *DB) RelayCounts(ctx context.Context) ([]RelayCount, error) {
	rows, err := db.sql.QueryContext(ctx, `SELECT f.name, o.rung, o.count FROM relay_ops o
		JOIN fixtures f ON f.id = o.fixture_id ORDER BY f.name, o.rung`)
	if err != nil {
		return nil, fmt.Errorf("relay counts: %w", err)
	}
	defer rows.Close()
	var out []RelayCount
	for rows.Next() {
		var (
			c RelayCount
			n int64
		)
		if err := rows.Scan(&c.Fixture, &c.Rung, &n); err != nil {
			return nil, fmt.Errorf("relay counts: %w", err)
		}
		c.Count = uint64(n)
		out = append(out, c)
	}
	return out, rows.Err()
}

// Refusal is one row the plant store refused, with the database's reason.
type Refusal struct {
	Kind    string // "run", "check" or "study"
	LocalID int64
	Reason  string
}

// Advance records a landed batch: the new cursors (each only moves
// forward), the runs accepted, and the refused rows, in one transaction.
type Advance struct {
	Runs, Checks, Studies int64 // new cursors
	Accepted              int64
	Refused               []Refusal
	At                    time.Time
}

// AdvanceOutbox commits a. A crash before it commits makes the forwarder
// send the batch again; the plant store drops what it already has. It
// commits on the outbox's own connection (outboxConn), without waiting for
// the disk.
func (db *DB) AdvanceOutbox(ctx context.Context, a Advance) error {
	// Prepared once: preparing it with every batch was a fifth of the
	// cursor's CPU time (BenchmarkUnitForwarding/every-unit, pprof).
	up, err := db.prepared(ctx, `UPDATE plant_outbox SET
		run_cursor = max(run_cursor, ?), check_cursor = max(check_cursor, ?), study_cursor = max(study_cursor, ?),
		forwarded = forwarded + ?, last_time = ?, last_error = '' WHERE id = 1`)
	if err != nil {
		return fmt.Errorf("advance outbox: %w", err)
	}
	db.wmu.Lock()
	defer db.wmu.Unlock()
	c, err := db.outboxConn(ctx)
	if err != nil {
		return fmt.Errorf("advance outbox: %w", err)
	}
	tx, err := c.BeginTx(ctx, nil)
	if err != nil {
		return fmt.Errorf("advance outbox: %w", err)
	}
	defer tx.Rollback()
	if _, err := tx.StmtContext(ctx, up).ExecContext(ctx, a.Runs, a.Checks, a.Studies, a.Accepted, a.At.UnixNano()); err != nil {
		return fmt.Errorf("advance outbox: %w", err)
	}
	for _, r := range a.Refused {
		if _, err := tx.ExecContext(ctx, `INSERT INTO plant_refused (kind, local_id, time, reason) VALUES (?, ?, ?, ?)
			ON CONFLICT (kind, local_id) DO UPDATE SET time = excluded.time, reason = excluded.reason`,
			r.Kind, r.LocalID, a.At.UnixNano(), r.Reason); err != nil {
			return fmt.Errorf("advance outbox: refused %s %d: %w", r.Kind, r.LocalID, err)
		}
	}
	if err := tx.Commit(); err != nil {
		return fmt.Errorf("advance outbox: %w", markFull(err))
	}
	return nil
}

// NoteOutboxError records the last forwarding error.
func (db *DB) NoteOutboxError(ctx context.Context, msg string, at time.Time) error {
	db.wmu.Lock()
	defer db.wmu.Unlock()
	c, err := db.outboxConn(ctx)
	if err == nil {
		_, err = c.ExecContext(ctx, `UPDATE plant_outbox SET last_error = ?, last_error_time = ? WHERE id = 1`,
			msg, at.UnixNano())
	}
	if err != nil {
		return fmt.Errorf("note outbox error: %w", err)
	}
	return nil
}

// RefusedRows returns the rows the plant store refused, newest first.
func (db *DB) RefusedRows(ctx context.Context, limit int) ([]Refusal, error) {
	rows, err := db.sql.QueryContext(ctx, `SELECT kind, local_id, reason FROM plant_refused ORDER BY time DESC, local_id DESC LIMIT ?`, limit)
	if err != nil {
		return nil, fmt.Errorf("refused rows: %w", err)
	}
	defer rows.Close()
	var out []Refusal
	for rows.Next() {
		var r Refusal
		if err := rows.Scan(&r.Kind, &r.LocalID, &r.Reason); err != nil {
			return nil, fmt.Errorf("refused rows: %w", err)
		}
		out = append(out, r)
	}
	return out, rows.Err()
}

// prepared returns q prepared once for the life of db: the forwarder runs
// the same few statements after every unit, and preparing them each time
// cost about as much as running them.
func (db *DB) prepared(ctx context.Context, q string) (*sql.Stmt, error) {
	db.smu.Lock()
	defer db.smu.Unlock()
	if st := db.stmts[q]; st != nil {
		return st, nil
	}
	st, err := db.sql.PrepareContext(ctx, q)
	if err != nil {
		return nil, err
	}
	if db.stmts == nil {
		db.stmts = map[string]*sql.Stmt{}
	}
	db.stmts[q] = st
	return st, nil
}

// outboxConn returns the connection the outbox's writes use, opened once
// with synchronous=NORMAL: in WAL mode its commits survive a crash of the
// process and wait for no fsync, which only a power cut can undo, and then
// the forwarder sends the batch again and the plant store drops it. The
// fsync of every batch's cursor was the larger part of its CPU time on the
// station (2,000 WAL commits of the cursor's UPDATE with the sqlite3
// shell: 0.93 s of CPU with FULL, 0.05 s with NORMAL). The shift log's own
// writes stay synchronous=FULL on the other connections (a later one's
// fsync also covers this one's frames). Call it holding wmu.
func (db *DB) outboxConn(ctx context.Context) (*sql.Conn, error) {
	db.omu.Lock()
	defer db.omu.Unlock()
	if db.oconn != nil {
		return db.oconn, nil
	}
	c, err := db.sql.Conn(ctx)
	if err != nil {
		return nil, err
	}
	if _, err := c.ExecContext(ctx, "PRAGMA synchronous=NORMAL"); err != nil {
		c.Close()
		return nil, err
	}
	db.oconn = c
	return c, nil
}

// closeOutboxConn returns the outbox's connection before the log closes.
func (db *DB) closeOutboxConn() {
	db.omu.Lock()
	defer db.omu.Unlock()
	if db.oconn != nil {
		// Back to FULL before it returns to the pool.
		db.oconn.ExecContext(context.Background(), "PRAGMA synchronous=FULL")
		db.oconn.Close()
		db.oconn = nil
	}
}
