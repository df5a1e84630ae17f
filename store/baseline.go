package store

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"math"
	"time"
)

// Baseline is an approved drift baseline of a variant's trip points: the
// centre and σ the charts use, how many points they came from and the
// window (times and serials) they were taken over.
type Baseline struct {
	ID                      int64
	Variant, Name           string
	Centre, Sigma           float64
	N                       int
	Method                  string
	Since, Until            time.Time
	FirstSerial, LastSerial string
	ApprovedBy              string
	ApprovedAt              time.Time
}

// SetBaseline stores b as the variant's latest approved baseline and
// returns its id.
func (db *DB) SetBaseline(ctx context.Context, b Baseline) (int64, error) {
	switch {
	case b.Variant == "" || b.Name == "":
		return 0, fmt.Errorf("set baseline: %w: variant %q, name %q", ErrInvalidRecord, b.Variant, b.Name)
	case math.IsNaN(b.Centre) || math.IsInf(b.Centre, 0) || !(b.Sigma > 0) || math.IsInf(b.Sigma, 0) || b.N < 2:
		return 0, fmt.Errorf("set baseline %s: %w: centre %g, σ %g, n %d", b.Name, ErrInvalidRecord, b.Centre, b.Sigma, b.N)
	case b.Until.Before(b.Since):
		return 0, fmt.Errorf("set baseline %s: %w: window ends %s before it starts %s", b.Name, ErrInvalidRecord, b.Until, b.Since)
	}
	db.wmu.Lock()
	defer db.wmu.Unlock()
	res, err := db.sql.ExecContext(ctx, `INSERT INTO drift_baselines
		(variant, name, centre, sigma, n, method, since, until, first_serial, last_serial, approved_by, approved_at)
		VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`,
		b.Variant, b.Name, b.Centre, b.Sigma, b.N, b.Method, b.Since.UnixNano(), b.Until.UnixNano(),
		b.FirstSerial, b.LastSerial, b.ApprovedBy, b.ApprovedAt.UnixNano())
	if err != nil {
		return 0, fmt.Errorf("set baseline %s: %w", b.Name, markFull(err))
	}
	return res.LastInsertId()
}

// LastBaseline returns the variant's baseline approved last (by
// insertion, not by timestamp), or ErrNotFound.
func (db *DB) LastBaseline(ctx context.Context, variant string) (Baseline, error) {
	b := Baseline{Variant: variant}
	var since, until, at int64
	err := db.sql.QueryRowContext(ctx, `SELECT id, name, centre, sigma, n, method, since, until, first_serial, last_serial, approved_by, approved_at
		FROM drift_baselines WHERE variant = ? ORDER BY id DESC LIMIT 1`, variant).
		Scan(&b.ID, &b.Name, &b.Centre, &b.Sigma, &b.N, &b.Method, &since, &until, &b.FirstSerial, &b.LastSerial, &b.ApprovedBy, &at)
	if errors.Is(err, sql.ErrNoRows) {
		return Baseline{}, fmt.Errorf("baseline of %s: %w", variant, ErrNotFound)
	}
	if err != nil {
		return Baseline{}, fmt.Errorf("baseline of %s: %w", variant, err)
	}
	b.Since, b.Until, b.ApprovedAt = time.Unix(0, since), time.Unix(0, until), time.Unix(0, at)
	return b, nil
}
