package store

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"math"
	"time"
)

// Limits version statuses.
const (
	LimitsPending  = "pending"
	LimitsApproved = "approved"
	LimitsRejected = "rejected"
)

// ErrDecided: a limits version was approved or rejected already.
var ErrDecided = errors.New("store: limits version already decided")

// LimitsVersion is one version of the test limits a station, fixture and
// variant judge units against (migration 0008): what it was computed from
// (the variant file's hash, the guard band U and where U came from), the
// limits, why it was made, and who decided on it.
type LimitsVersion struct {
	ID                        int64
	Station, Fixture, Variant string
	Created                   time.Time
	Cause                     string
	VariantHash               string
	UPF                       float64
	USource                   string
	LowPF, HighPF             float64
	Status                    string
	ApprovedBy                string
	Decided                   time.Time // zero while pending
	Reason                    string
}

const limitsCols = `id, station, fixture, variant, created, cause, variant_hash, u_pf, u_source, low_pf, high_pf, status, approved_by, decided, reason`

// AddLimitsVersion stores v (Status pending or approved) and returns its id.
func (db *DB) AddLimitsVersion(ctx context.Context, v LimitsVersion) (int64, error) {
	switch {
	case v.Station == "" || v.Fixture == "" || v.Variant == "" || v.VariantHash == "" || v.Cause == "":
		return 0, fmt.Errorf("add limits version: %w: station %q fixture %q variant %q", ErrInvalidRecord, v.Station, v.Fixture, v.Variant)
	case !(v.UPF > 0) || !(v.HighPF > v.LowPF) || math.IsInf(v.HighPF, 0) || math.IsInf(v.LowPF, 0):
		return 0, fmt.Errorf("add limits version: %w: U %g, limits %g … %g", ErrInvalidRecord, v.UPF, v.LowPF, v.HighPF)
	case v.Status != LimitsPending && v.Status != LimitsApproved:
		return 0, fmt.Errorf("add limits version: %w: status %q", ErrInvalidRecord, v.Status)
	}
	var decided int64
	if !v.Decided.IsZero() {
		decided = v.Decided.UnixNano()
	}
	db.wmu.Lock()
	defer db.wmu.Unlock()
	res, err := db.sql.ExecContext(ctx, `INSERT INTO limits_versions
		(station, fixture, variant, created, cause, variant_hash, u_pf, u_source, low_pf, high_pf, status, approved_by, decided, reason)
		VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`,
		v.Station, v.Fixture, v.Variant, v.Created.UnixNano(), v.Cause, v.VariantHash, v.UPF, v.USource,
		v.LowPF, v.HighPF, v.Status, v.ApprovedBy, decided, v.Reason)
	if err != nil {
		return 0, fmt.Errorf("add limits version: %w", markFull(err))
	}
	return res.LastInsertId()
}

// DecideLimitsVersion approves or rejects the pending version id, naming
// who and why. A decided version is ErrDecided; an unknown id ErrNotFound.
func (db *DB) DecideLimitsVersion(ctx context.Context, id int64, status, by, reason string, at time.Time) error {
	if (status != LimitsApproved && status != LimitsRejected) || by == "" || reason == "" {
		return fmt.Errorf("decide limits version %d: %w: status %q, by %q, reason %q", id, ErrInvalidRecord, status, by, reason)
	}
	db.wmu.Lock()
	defer db.wmu.Unlock()
	res, err := db.sql.ExecContext(ctx, `UPDATE limits_versions SET status = ?, approved_by = ?, reason = ?, decided = ?
		WHERE id = ? AND status = 'pending'`, status, by, reason, at.UnixNano(), id)
	if err != nil {
		return fmt.Errorf("decide limits version %d: %w", id, markFull(err))
	}
	if n, err := res.RowsAffected(); err != nil || n == 1 {
		return err
	}
	if _, err := db.LimitsVersionByID(ctx, id); err != nil {
		return err
	}
	return fmt.Errorf("limits version %d: %w", id, ErrDecided)
}

// LimitsVersionByID returns version id, or ErrNotFound.
func (db *DB) LimitsVersionByID(ctx context.Context, id int64) (LimitsVersion, error) {
	vs, err := db.queryLimits(ctx, `SELECT `+limitsCols+` FROM limits_versions WHERE id = ?`, id)
	if err != nil {
		return LimitsVersion{}, err
	}
	if len(vs) == 0 {
		return LimitsVersion{}, fmt.Errorf("limits version %d: %w", id, ErrNotFound)
	}
	return vs[0], nil
}

// LimitsVersions lists the versions, oldest first; empty station, fixture,
// variant or status match any.
func (db *DB) LimitsVersions(ctx context.Context, station, fixture, variant, status string) ([]LimitsVersion, error) {
	return db.queryLimits(ctx, `SELECT `+limitsCols+` FROM limits_versions
		WHERE (? = '' OR station = ?) AND (? = '' OR fixture = ?) AND (? = '' OR variant = ?) AND (? = '' OR status = ?)
		ORDER BY id`, station, station, fixture, fixture, variant, variant, status, status)
}

// LatestLimitsVersion returns the station, fixture and variant's newest
// version, or ErrNotFound.
func (db *DB) LatestLimitsVersion(ctx context.Context, station, fixture, variant string) (LimitsVersion, error) {
	vs, err := db.queryLimits(ctx, `SELECT `+limitsCols+` FROM limits_versions
		WHERE station = ? AND fixture = ? AND variant = ? ORDER BY id DESC LIMIT 1`, station, fixture, variant)
	if err != nil {
		return LimitsVersion{}, err
	}
	if len(vs) == 0 {
		return LimitsVersion{}, fmt.Errorf("limits of %s on %s %s: %w", variant, station, fixture, ErrNotFound)
	}
	return vs[0], nil
}

func (db *DB) queryLimits(ctx context.Context, q string, args ...any) ([]LimitsVersion, error) {
	rows, err := db.sql.QueryContext(ctx, q, args...)
	if err != nil {
		return nil, fmt.Errorf("limits versions: %w", err)
	}
	defer rows.Close()
	var out []LimitsVersion
	for rows.Next() {
		var v LimitsVersion
		var created, decided int64
		if err := rows.Scan(&v.ID, &v.Station, &v.Fixture, &v.Variant, &created, &v.Cause, &v.VariantHash, &v.UPF, &v.USource,
			&v.LowPF, &v.HighPF, &v.Status, &v.ApprovedBy, &decided, &v.Reason); err != nil {
			return nil, fmt.Errorf("limits versions: %w", err)
		}
		v.Created = time.Unix(0, created).UTC()
		if decided != 0 {
			v.Decided = time.Unix(0, decided).UTC()
		}
		out = append(out, v)
	}
	if err := rows.Err(); err != nil && !errors.Is(err, sql.ErrNoRows) {
		return nil, fmt.Errorf("limits versions: %w", err)
	}
	return out, nil
}
