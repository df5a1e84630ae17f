package store

import (
	"context"
	"database/sql"
	"encoding/json"
	"errors"
	"fmt"
	"time"
)

// This file is station trust in the shift log: reference checks (the gate
// in front of production units), measurement-system studies and the
// station's uncertainty (migration 0003). The payloads are JSON written by
// the caller; the store keeps them verbatim and checks only that they are
// JSON.

// ErrInvalidRecord: a check, study or uncertainty lacks a field the log
// requires.
var ErrInvalidRecord = errors.New("store: invalid trust record")

// Study kinds.
const (
	StudyType1 = "type1" // one reference unit measured n times
	StudyGRR   = "grr"   // gauge R&R, AIAG average-and-range method
)

// StationCheck is one shift-start reference check of a station's fixture.
type StationCheck struct {
	ID      int64
	Time    time.Time
	Station string
	Fixture string
	// StationHash is the hex sha256 of the station file the check ran
	// under: a changed file invalidates the check.
	StationHash string
	// OK is true when the check passed; false puts the station in the
	// refused state.
	OK bool
	// LastRunID is the highest run id in the log when the check ran (0:
	// none), so the runs since can be counted.
	LastRunID int64
	// Details is the check's report as JSON.
	Details json.RawMessage
}

// Study is one stored measurement-system study.
type Study struct {
	ID      int64
	Kind    string // StudyType1 or StudyGRR
	Time    time.Time
	Station string
	Fixture string
	Results json.RawMessage
}

// Uncertainty is a station's stored measurement uncertainty.
type Uncertainty struct {
	ID      int64
	Time    time.Time
	Station string
	Fixture string
	// UPF is the expanded uncertainty U (k = 2) and UCPF the combined
	// standard uncertainty u_c, both in pF.
	UPF, UCPF float64
	// Components is the budget's components as JSON.
	Components json.RawMessage
	// Source says where the inputs came from (which study, which file).
	Source string
}

func checkPayload(what string, station, fixture string, t time.Time, payload json.RawMessage) error {
	switch {
	case station == "" || fixture == "":
		return fmt.Errorf("%w: %s without station or fixture", ErrInvalidRecord, what)
	case t.IsZero():
		return fmt.Errorf("%w: %s without a time", ErrInvalidRecord, what)
	case !json.Valid(payload):
		return fmt.Errorf("%w: %s payload is not JSON", ErrInvalidRecord, what)
	}
	return nil
}

// insertTrust interns station and fixture and runs one INSERT whose first
// three arguments are time, station id and fixture id, followed by args; it
// returns the new id.
func (db *DB) insertTrust(ctx context.Context, what, station, fixture, q string, t time.Time, args ...any) (int64, error) {
	db.wmu.Lock()
	defer db.wmu.Unlock()
	tx, err := db.sql.BeginTx(ctx, nil)
	if err != nil {
		return 0, fmt.Errorf("record %s: %w", what, err)
	}
	defer tx.Rollback()
	w := &writer{db: db, tx: tx, pending: map[string]int64{}}
	sid, err := w.intern(ctx, "stations", station)
	if err != nil {
		return 0, fmt.Errorf("record %s: %w", what, err)
	}
	fid, err := w.intern(ctx, "fixtures", fixture)
	if err != nil {
		return 0, fmt.Errorf("record %s: %w", what, err)
	}
	res, err := tx.ExecContext(ctx, q, append([]any{t.UnixNano(), sid, fid}, args...)...)
	if err != nil {
		return 0, fmt.Errorf("record %s: %w", what, err)
	}
	id, err := res.LastInsertId()
	if err != nil {
		return 0, fmt.Errorf("record %s: %w", what, err)
	}
	if err := tx.Commit(); err != nil {
		return 0, fmt.Errorf("record %s: %w", what, markFull(err))
	}
	db.ids.merge(w.pending)
	return id, nil
}

// RecordCheck commits one station check and returns its id.
func (db *DB) RecordCheck(ctx context.Context, c StationCheck) (int64, error) {
	if err := checkPayload("station check", c.Station, c.Fixture, c.Time, c.Details); err != nil {
		return 0, fmt.Errorf("record station check: %w", err)
	}
	if c.StationHash == "" || c.LastRunID < 0 {
		return 0, fmt.Errorf("record station check: %w: station hash %q, last run id %d", ErrInvalidRecord, c.StationHash, c.LastRunID)
	}
	ok := 0
	if c.OK {
		ok = 1
	}
	return db.insertTrust(ctx, "station check", c.Station, c.Fixture,
		`INSERT INTO station_checks (time, station_id, fixture_id, station_hash, ok, last_run_id, details)
		 VALUES (?, ?, ?, ?, ?, ?, ?)`, c.Time, c.StationHash, ok, c.LastRunID, string(c.Details))
}

// LastCheck returns the check of station's fixture recorded last, or
// ErrNotFound. "Last" is by insertion, never by timestamp: a check stamped
// in the future by a wrong clock must not hide a later failed one.
func (db *DB) LastCheck(ctx context.Context, station, fixture string) (StationCheck, error) {
	c := StationCheck{Station: station, Fixture: fixture}
	var t int64
	var ok int
	var details string
	err := db.sql.QueryRowContext(ctx,
		`SELECT c.id, c.time, c.station_hash, c.ok, c.last_run_id, c.details
		 FROM station_checks c JOIN stations s ON s.id = c.station_id JOIN fixtures f ON f.id = c.fixture_id
		 WHERE s.name = ? AND f.name = ? ORDER BY c.id DESC LIMIT 1`, station, fixture).
		Scan(&c.ID, &t, &c.StationHash, &ok, &c.LastRunID, &details)
	if errors.Is(err, sql.ErrNoRows) {
		return c, fmt.Errorf("last check of %s/%s: %w", station, fixture, ErrNotFound)
	}
	if err != nil {
		return c, fmt.Errorf("last check of %s/%s: %w", station, fixture, err)
	}
	c.Time, c.OK, c.Details = time.Unix(0, t).UTC(), ok == 1, json.RawMessage(details)
	return c, nil
}

// RecordStudy commits one study and returns its id.
func (db *DB) RecordStudy(ctx context.Context, s Study) (int64, error) {
	if err := checkPayload("study", s.Station, s.Fixture, s.Time, s.Results); err != nil {
		return 0, fmt.Errorf("record study: %w", err)
	}
	if s.Kind != StudyType1 && s.Kind != StudyGRR {
		return 0, fmt.Errorf("record study: %w: kind %q", ErrInvalidRecord, s.Kind)
	}
	return db.insertTrust(ctx, "study", s.Station, s.Fixture,
		`INSERT INTO studies (time, station_id, fixture_id, kind, results) VALUES (?, ?, ?, ?, ?)`,
		s.Time, s.Kind, string(s.Results))
}

// LastStudy returns the last recorded (by insertion) study of kind (StudyType1, StudyGRR, or ""
// for either) of station's fixture, or ErrNotFound.
func (db *DB) LastStudy(ctx context.Context, station, fixture, kind string) (Study, error) {
	s := Study{Station: station, Fixture: fixture}
	var t int64
	var results string
	err := db.sql.QueryRowContext(ctx,
		`SELECT x.id, x.kind, x.time, x.results
		 FROM studies x JOIN stations s ON s.id = x.station_id JOIN fixtures f ON f.id = x.fixture_id
		 WHERE s.name = ? AND f.name = ? AND (? = '' OR x.kind = ?) ORDER BY x.id DESC LIMIT 1`,
		station, fixture, kind, kind).Scan(&s.ID, &s.Kind, &t, &results)
	if errors.Is(err, sql.ErrNoRows) {
		return s, fmt.Errorf("last %s study of %s/%s: %w", kind, station, fixture, ErrNotFound)
	}
	if err != nil {
		return s, fmt.Errorf("last %s study of %s/%s: %w", kind, station, fixture, err)
	}
	s.Time, s.Results = time.Unix(0, t).UTC(), json.RawMessage(results)
	return s, nil
}

// SaveUncertainty commits a station's uncertainty and returns its id.
func (db *DB) SaveUncertainty(ctx context.Context, u Uncertainty) (int64, error) {
	if err := checkPayload("uncertainty", u.Station, u.Fixture, u.Time, u.Components); err != nil {
		return 0, fmt.Errorf("save uncertainty: %w", err)
	}
	if !(u.UPF >= 0) || !(u.UCPF >= 0) || u.Source == "" {
		return 0, fmt.Errorf("save uncertainty: %w: U %g, u_c %g, source %q", ErrInvalidRecord, u.UPF, u.UCPF, u.Source)
	}
	return db.insertTrust(ctx, "uncertainty", u.Station, u.Fixture,
		`INSERT INTO station_uncertainty (time, station_id, fixture_id, u_pf, uc_pf, components, source)
		 VALUES (?, ?, ?, ?, ?, ?, ?)`, u.Time, u.UPF, u.UCPF, string(u.Components), u.Source)
}

// LastUncertainty returns station's fixture's last stored (by insertion)
// uncertainty, or ErrNotFound.
func (db *DB) LastUncertainty(ctx context.Context, station, fixture string) (Uncertainty, error) {
	u := Uncertainty{Station: station, Fixture: fixture}
	var t int64
	var comps string
	err := db.sql.QueryRowContext(ctx,
		`SELECT x.id, x.time, x.u_pf, x.uc_pf, x.components, x.source
		 FROM station_uncertainty x JOIN stations s ON s.id = x.station_id JOIN fixtures f ON f.id = x.fixture_id
		 WHERE s.name = ? AND f.name = ? ORDER BY x.id DESC LIMIT 1`, station, fixture).
		Scan(&u.ID, &t, &u.UPF, &u.UCPF, &comps, &u.Source)
	if errors.Is(err, sql.ErrNoRows) {
		return u, fmt.Errorf("uncertainty of %s/%s: %w", station, fixture, ErrNotFound)
	}
	if err != nil {
		return u, fmt.Errorf("uncertainty of %s/%s: %w", station, fixture, err)
	}
	u.Time, u.Components = time.Unix(0, t).UTC(), json.RawMessage(comps)
	return u, nil
}

// LastRunID returns the highest run id in the log, 0 when there is none.
func (db *DB) LastRunID(ctx context.Context) (int64, error) {
	var id sql.NullInt64
	if err := db.sql.QueryRowContext(ctx, "SELECT max(id) FROM runs").Scan(&id); err != nil {
		return 0, fmt.Errorf("last run id: %w", err)
	}
	return id.Int64, nil
}

// RunsSince counts the runs of station's fixture with an id above runID:
// the units tested since a check that saw runID as the last run.
func (db *DB) RunsSince(ctx context.Context, station, fixture string, runID int64) (int64, error) {
	var n int64
	err := db.sql.QueryRowContext(ctx,
		`SELECT count(*) FROM runs r JOIN stations s ON s.id = r.station_id JOIN fixtures f ON f.id = r.fixture_id
		 WHERE s.name = ? AND f.name = ? AND r.id > ?`, station, fixture, runID).Scan(&n)
	if err != nil {
		return 0, fmt.Errorf("runs since %d on %s/%s: %w", runID, station, fixture, err)
	}
	return n, nil
}

// LatestTime returns the latest time stamped on anything in the log (runs,
// checks, studies, uncertainties), or the zero time for an empty log. A
// station whose wall clock reads earlier than this has had its clock set
// back: its gate cannot trust "hours since the check".
func (db *DB) LatestTime(ctx context.Context) (time.Time, error) {
	var t sql.NullInt64
	err := db.sql.QueryRowContext(ctx, `SELECT max(t) FROM (
		SELECT max(finished) AS t FROM runs
		UNION ALL SELECT max(time) FROM station_checks
		UNION ALL SELECT max(time) FROM studies
		UNION ALL SELECT max(time) FROM station_uncertainty)`).Scan(&t)
	if err != nil {
		return time.Time{}, fmt.Errorf("latest time in the log: %w", err)
	}
	if !t.Valid {
		return time.Time{}, nil
	}
	return time.Unix(0, t.Int64).UTC(), nil
}
