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

// OutboxState returns the forwarding state, backlog included, with an
// advance still pending in this process (DeferAdvance) merged in: the
// cursors it moves, the backlog after them, the runs it accepted and its
// time.
func (db *DB) OutboxState(ctx context.Context) (Outbox, error) {
	var (
		o           Outbox
		last, errAt sql.NullInt64
		p           Advance
		pending     bool
	)
	stmt, err := db.prepared(ctx, `
		WITH o AS (SELECT log_uuid, max(run_cursor, ?) AS rc, max(check_cursor, ?) AS cc,
		                  max(study_cursor, ?) AS sc, forwarded + ? AS fw, last_time, last_error, last_error_time
		           FROM plant_outbox WHERE id = 1)
		SELECT o.log_uuid, o.rc, o.cc, o.sc, o.fw, o.last_time, o.last_error, o.last_error_time,
		       (SELECT count(*) FROM runs WHERE id > o.rc),
		       (SELECT count(*) FROM station_checks WHERE id > o.cc),
		       (SELECT count(*) FROM studies WHERE id > o.sc),
		       (SELECT count(*) FROM plant_refused)
		FROM o`)
	if err != nil {
		return o, fmt.Errorf("outbox state: %w", err)
	}
	db.pmu.Lock()
	if db.pend != nil {
		// Held through the read: a run's commit that writes the pending
		// advance meanwhile would have it counted twice.
		p, pending = *db.pend, true
		defer db.pmu.Unlock()
	} else {
		db.pmu.Unlock()
	}
	err = stmt.QueryRowContext(ctx, p.Runs, p.Checks, p.Studies, p.Accepted).Scan(&o.LogUUID, &o.RunCursor, &o.CheckCursor, &o.StudyCursor,
		&o.Forwarded, &last, &o.LastError, &errAt, &o.BacklogRuns, &o.BacklogChecks, &o.BacklogStudies, &o.Refused)
	if err != nil {
		return o, fmt.Errorf("outbox state: %w", err)
	}
	if pending {
		// A pending advance was made after any error noted so far
		// (NoteOutboxError writes it first), and clears it as it lands.
		if !last.Valid || p.At.UnixNano() > last.Int64 {
			last = sql.NullInt64{Int64: p.At.UnixNano(), Valid: true}
		}
		o.LastError = ""
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

// advanceSQL moves the cursors of a landed batch; each only moves forward,
// so applying an advance twice, or an older one after a newer, is harmless.
const advanceSQL = `UPDATE plant_outbox SET
	run_cursor = max(run_cursor, ?), check_cursor = max(check_cursor, ?), study_cursor = max(study_cursor, ?),
	forwarded = forwarded + ?, last_time = ?, last_error = '' WHERE id = 1`

// AdvanceOutbox commits a, with any advance still pending (DeferAdvance),
// at once. A crash before it commits makes the forwarder send the batch
// again; the plant store drops what it already has. It commits on the
// outbox's own connection (outboxConn), without waiting for the disk.
func (db *DB) AdvanceOutbox(ctx context.Context, a Advance) error {
	db.wmu.Lock()
	defer db.wmu.Unlock()
	db.pmu.Lock()
	defer db.pmu.Unlock()
	p := db.pend
	if p != nil {
		a = mergeAdvance(*p, a)
	}
	if err := db.advanceLocked(ctx, a); err != nil {
		return err
	}
	db.pend = nil
	return nil
}

// advanceLocked commits a on the outbox's connection. Call it holding
// wmu and pmu.
func (db *DB) advanceLocked(ctx context.Context, a Advance) error {
	// Prepared once: preparing it with every batch was a fifth of the
	// cursor's CPU time (BenchmarkUnitForwarding/every-unit, pprof).
	up, err := db.prepared(ctx, advanceSQL)
	if err != nil {
		return fmt.Errorf("advance outbox: %w", err)
	}
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

// advanceIn applies a, which has no refusals, in tx (a run's commit).
func (db *DB) advanceIn(ctx context.Context, tx *sql.Tx, a Advance) error {
	up, err := db.prepared(ctx, advanceSQL)
	if err != nil {
		return err
	}
	_, err = tx.StmtContext(ctx, up).ExecContext(ctx, a.Runs, a.Checks, a.Studies, a.Accepted, a.At.UnixNano())
	return err
}

// mergeAdvance is a then b as one advance: the higher cursors, the runs
// accepted by both, the later time and both batches' refusals.
func mergeAdvance(a, b Advance) Advance {
	m := Advance{Runs: max(a.Runs, b.Runs), Checks: max(a.Checks, b.Checks), Studies: max(a.Studies, b.Studies),
		Accepted: a.Accepted + b.Accepted, At: a.At}
	if b.At.After(m.At) {
		m.At = b.At
	}
	if len(a.Refused)+len(b.Refused) > 0 {
		m.Refused = append(append([]Refusal(nil), a.Refused...), b.Refused...)
	}
	return m
}

// A landed batch's cursor need not be committed on its own. The plant
// store has the batch, so losing the cursor costs only a resend, which the
// plant store drops by its run key. Committing it after every batch of a
// slow line (a batch per unit) was the larger part of what forwarding
// added to a unit's CPU time on the station (BenchmarkUnitForwarding
// every-unit: 0.44 of 1.39 ms; README "The plant store"). So DeferAdvance
// keeps the advance in memory and the next run's commit (Record) writes it
// in its own transaction; it is written on its own only when rows were
// refused (they are reported), by FlushOutbox (the forwarder's Drain and
// stop, Close, an error noted) and by FlushIdleOutbox once the line has
// committed no run for a while. OutboxState merges it, so this process
// sees the cursor at once; another process ('padline plant status') sees
// it a unit or a few seconds late.

// The idle flush: a pending advance is written on its own once no run
// has been committed since it for twice the last interval between two
// runs, at least idleFlushMin and at most idleFlushMax. A steady line
// never waits that long between units, so its cursors always ride a run's
// commit, whatever its takt up to idleFlushMax/2; a line that stops shows
// its last batch in the log idleFlushMin to idleFlushMax after it.
const (
	idleFlushMin = 5 * time.Second
	idleFlushMax = time.Minute
)

// DeferAdvance hands the log a landed batch's advance to commit with the
// next run (Record), merged with any advance already pending. An advance
// with refused rows is committed at once (AdvanceOutbox): refusals are
// reported. The cursor only ever moves after the plant store committed,
// so an advance lost in a crash means the batch is sent again and dropped
// by the plant store's run key.
func (db *DB) DeferAdvance(ctx context.Context, a Advance) error {
	if len(a.Refused) > 0 {
		return db.AdvanceOutbox(ctx, a)
	}
	db.pmu.Lock()
	defer db.pmu.Unlock()
	if db.pend == nil {
		p := a
		db.pend = &p
		db.pendSince = db.now()
		return nil
	}
	*db.pend = mergeAdvance(*db.pend, a)
	return nil
}

// takePending returns the pending advance for a run's commit, nil if none,
// and then holds pmu until Record calls donePending: a read of the state
// meanwhile would otherwise count the accepted runs twice (in the log and
// in memory).
func (db *DB) takePending() *Advance {
	db.pmu.Lock()
	if db.pend == nil {
		db.pmu.Unlock()
		return nil
	}
	return db.pend
}

// donePending ends what takePending began (p non-nil): committed tells
// whether the run's transaction, with the advance in it, committed.
func (db *DB) donePending(committed bool) {
	if committed {
		db.pend = nil
	}
	db.pmu.Unlock()
}

// noteRecord notes a run's commit at t for the idle flush.
func (db *DB) noteRecord(t time.Time) {
	db.pmu.Lock()
	if !db.lastRecord.IsZero() {
		db.recordGap = t.Sub(db.lastRecord)
	}
	db.lastRecord = t
	db.pmu.Unlock()
}

// FlushOutbox commits a pending advance on its own now (nothing if none).
func (db *DB) FlushOutbox(ctx context.Context) error {
	db.wmu.Lock()
	defer db.wmu.Unlock()
	db.pmu.Lock()
	defer db.pmu.Unlock()
	return db.flushLocked(ctx)
}

// flushLocked commits the pending advance; call it holding wmu and pmu.
func (db *DB) flushLocked(ctx context.Context) error {
	if db.pend == nil {
		return nil
	}
	if err := db.advanceLocked(ctx, *db.pend); err != nil {
		return err
	}
	db.pend = nil
	return nil
}

// FlushIdleOutbox commits a pending advance on its own when the line has
// committed no run since it for the idle time (idleFlushMin to
// idleFlushMax): a stopped line's status catches up. Otherwise it returns
// how long until a pending advance is due (0: none pending).
func (db *DB) FlushIdleOutbox(ctx context.Context) (time.Duration, error) {
	db.pmu.Lock()
	since := db.pendSince
	if db.lastRecord.After(since) {
		since = db.lastRecord
	}
	pending := db.pend != nil
	left := db.idleAfterLocked() - db.now().Sub(since)
	db.pmu.Unlock()
	if !pending {
		return 0, nil
	}
	if left > 0 {
		return left, nil
	}
	return 0, db.FlushOutbox(ctx)
}

// idleAfterLocked is how long a pending advance waits for a run's commit.
func (db *DB) idleAfterLocked() time.Duration {
	return min(max(2*db.recordGap, idleFlushMin), idleFlushMax)
}

// NoteOutboxError records the last forwarding error, after a pending
// advance (which would otherwise clear it when it rides a later commit).
func (db *DB) NoteOutboxError(ctx context.Context, msg string, at time.Time) error {
	db.wmu.Lock()
	defer db.wmu.Unlock()
	db.pmu.Lock()
	defer db.pmu.Unlock()
	err := db.flushLocked(ctx)
	var c *sql.Conn
	if err == nil {
		c, err = db.outboxConn(ctx)
	}
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
