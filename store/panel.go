package store

import (
	"context"
	"database/sql"
	"fmt"
	"time"

	"padline/sequences"
)

// panelOf and siteOf are a run's panel columns: NULL for a unit tested
// alone.
func panelOf(r *sequences.Run) sql.NullString {
	return sql.NullString{String: r.Panel, Valid: r.Panel != ""}
}

func siteOf(r *sequences.Run) sql.NullInt64 {
	return sql.NullInt64{Int64: int64(r.Site), Valid: r.Panel != ""}
}

// XOut is a site marked bad on its panel before test: skipped and logged
// as not tested (it has no run).
type XOut struct {
	Time     time.Time
	Panel    string
	Site     int // 1-based
	Serial   string
	Variant  string
	Station  string
	Fixture  string
	Operator string
}

// RecordXOut logs an x-out. The variant must be registered (PutVariant).
func (db *DB) RecordXOut(ctx context.Context, x XOut) error {
	if x.Panel == "" || x.Site < 1 || x.Serial == "" || x.Variant == "" {
		return fmt.Errorf("%w: x-out needs panel, site ≥ 1, serial and variant: %+v", ErrInvalidRun, x)
	}
	db.wmu.Lock()
	defer db.wmu.Unlock()
	tx, err := db.sql.BeginTx(ctx, nil)
	if err != nil {
		return fmt.Errorf("record x-out: %w", err)
	}
	defer tx.Rollback()
	w := &writer{db: db, tx: tx, pending: map[string]int64{}}
	defer w.close()
	var vid int64
	if err := tx.QueryRowContext(ctx, "SELECT id FROM variants WHERE name = ?", x.Variant).Scan(&vid); err != nil {
		return fmt.Errorf("record x-out: variant %s (register it with PutVariant): %w", x.Variant, err)
	}
	sid, err := w.intern(ctx, "stations", x.Station)
	if err != nil {
		return fmt.Errorf("record x-out: %w", err)
	}
	fid, err := w.intern(ctx, "fixtures", x.Fixture)
	if err != nil {
		return fmt.Errorf("record x-out: %w", err)
	}
	if _, err := tx.ExecContext(ctx,
		`INSERT INTO xouts (time, panel, site, serial, variant_id, station_id, fixture_id, operator)
		 VALUES (?, ?, ?, ?, ?, ?, ?, ?)`,
		x.Time.UnixNano(), x.Panel, x.Site, x.Serial, vid, sid, fid, x.Operator); err != nil {
		return fmt.Errorf("record x-out: %w", err)
	}
	if err := tx.Commit(); err != nil {
		return fmt.Errorf("record x-out: %w", err)
	}
	db.ids.merge(w.pending)
	return nil
}

// XOuts returns the x-outs logged for a panel ("" = every panel), oldest
// first.
func (db *DB) XOuts(ctx context.Context, panel string) ([]XOut, error) {
	rows, err := db.sql.QueryContext(ctx, `
SELECT x.time, x.panel, x.site, x.serial, v.name, s.name, f.name, x.operator
FROM xouts x
JOIN variants v ON v.id = x.variant_id
JOIN stations s ON s.id = x.station_id
JOIN fixtures f ON f.id = x.fixture_id
WHERE ? = '' OR x.panel = ?
ORDER BY x.time, x.id`, panel, panel)
	if err != nil {
		return nil, fmt.Errorf("x-outs: %w", err)
	}
	defer rows.Close()
	var out []XOut
	for rows.Next() {
		var x XOut
		var t int64
		if err := rows.Scan(&t, &x.Panel, &x.Site, &x.Serial, &x.Variant, &x.Station, &x.Fixture, &x.Operator); err != nil {
			return nil, fmt.Errorf("x-outs: %w", err)
		}
		x.Time = time.Unix(0, t).UTC()
		out = append(out, x)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("x-outs: %w", err)
	}
	return out, nil
}
