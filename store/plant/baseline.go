package plant

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"padline/store"
)

// Approved drift baselines on the plant store (migration 0010): approved
// here, over the plant's runs, and never forwarded from a station
// (DEVELOPERS.md "Approved baselines on the plant"). The methods mirror
// store.DB's, so drift reads either through one interface.

// SetBaseline stores b as the variant's latest approved baseline on the
// plant and returns its id. It needs the right to write the table (the
// schema owner); a station or reader role is refused by the database.
func (db *DB) SetBaseline(ctx context.Context, b store.Baseline) (int64, error) {
	switch {
	case b.Variant == "" || b.Name == "":
		return 0, fmt.Errorf("set plant baseline: %w: variant %q, name %q", store.ErrInvalidRecord, b.Variant, b.Name)
	case math.IsNaN(b.Centre) || math.IsInf(b.Centre, 0) || !(b.Sigma > 0) || math.IsInf(b.Sigma, 0) || b.N < 2:
		return 0, fmt.Errorf("set plant baseline %s: %w: centre %g, σ %g, n %d", b.Name, store.ErrInvalidRecord, b.Centre, b.Sigma, b.N)
	case b.Until.Before(b.Since):
		return 0, fmt.Errorf("set plant baseline %s: %w: window ends %s before it starts %s", b.Name, store.ErrInvalidRecord, b.Until, b.Since)
	}
	var id int64
	err := db.pool.QueryRow(ctx, `INSERT INTO drift_baselines
		(variant, name, centre, sigma, n, method, since, until, first_serial, last_serial, approved_by, approved_at)
		VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12) RETURNING id`,
		b.Variant, b.Name, b.Centre, b.Sigma, b.N, b.Method, b.Since.UnixNano(), b.Until.UnixNano(),
		b.FirstSerial, b.LastSerial, b.ApprovedBy, b.ApprovedAt.UnixNano()).Scan(&id)
	if err != nil {
		return 0, fmt.Errorf("set plant baseline %s (table drift_baselines): %w", b.Name, noBaselines(err))
	}
	return id, nil
}

// LastBaseline returns the variant's baseline approved last on the plant
// (by insertion, not by timestamp); ErrNotFound (also store.ErrNotFound)
// when there is none.
func (db *DB) LastBaseline(ctx context.Context, variant string) (store.Baseline, error) {
	b := store.Baseline{Variant: variant}
	var since, until, at int64
	var n int32
	err := db.pool.QueryRow(ctx, `SELECT id, name, centre, sigma, n, method, since, until, first_serial, last_serial, approved_by, approved_at
		FROM drift_baselines WHERE variant = $1 ORDER BY id DESC LIMIT 1`, variant).
		Scan(&b.ID, &b.Name, &b.Centre, &b.Sigma, &n, &b.Method, &since, &until, &b.FirstSerial, &b.LastSerial, &b.ApprovedBy, &at)
	if errors.Is(err, pgx.ErrNoRows) {
		return store.Baseline{}, fmt.Errorf("plant baseline of %s: %w: %w", variant, ErrNotFound, store.ErrNotFound)
	}
	if err != nil {
		return store.Baseline{}, fmt.Errorf("plant baseline of %s (table drift_baselines): %w", variant, noBaselines(err))
	}
	b.N = int(n)
	b.Since, b.Until, b.ApprovedAt = time.Unix(0, since), time.Unix(0, until), time.Unix(0, at)
	return b, nil
}

// noBaselines says how to add the table to a plant store migrated before
// it existed.
func noBaselines(err error) error {
	var pe *pgconn.PgError
	if errors.As(err, &pe) && pe.Code == "42P01" { // undefined_table
		return fmt.Errorf("%w (the plant schema predates approved baselines: run 'padline plant init --db URL' as its owner)", err)
	}
	return err
}
