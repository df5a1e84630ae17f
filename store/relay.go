package store

import (
	"context"
	"fmt"
	"math"
)

// LoadRelayOps returns the persisted relay operation count of each ladder
// rung of fixture, indexed by rung; nil when none are stored.
func (db *DB) LoadRelayOps(ctx context.Context, fixture string) ([]uint64, error) {
	rows, err := db.sql.QueryContext(ctx,
		`SELECT o.rung, o.count FROM relay_ops o JOIN fixtures f ON f.id = o.fixture_id
		 WHERE f.name = ? ORDER BY o.rung`, fixture)
	if err != nil {
		return nil, fmt.Errorf("load relay ops of %s: %w", fixture, err)
	}
	defer rows.Close()
	var out []uint64
	for rows.Next() {
		var rung, count int64
		if err := rows.Scan(&rung, &count); err != nil {
			return nil, fmt.Errorf("load relay ops of %s: %w", fixture, err)
		}
		for int64(len(out)) <= rung {
			out = append(out, 0)
		}
		out[rung] = uint64(count)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("load relay ops of %s: %w", fixture, err)
	}
	return out, nil
}

// SaveRelayOps stores counts (indexed by rung) as fixture's relay operation
// counts, replacing what was stored, in one transaction.
func (db *DB) SaveRelayOps(ctx context.Context, fixture string, counts []uint64) error {
	for i, c := range counts {
		if c > math.MaxInt64 {
			return fmt.Errorf("save relay ops of %s: rung %d: count %d too large", fixture, i, c)
		}
	}
	db.wmu.Lock()
	defer db.wmu.Unlock()
	tx, err := db.sql.BeginTx(ctx, nil)
	if err != nil {
		return fmt.Errorf("save relay ops of %s: %w", fixture, err)
	}
	defer tx.Rollback()
	w := &writer{db: db, tx: tx, pending: map[string]int64{}}
	fid, err := w.intern(ctx, "fixtures", fixture)
	if err != nil {
		return fmt.Errorf("save relay ops of %s: %w", fixture, err)
	}
	if _, err := tx.ExecContext(ctx, "DELETE FROM relay_ops WHERE fixture_id = ?", fid); err != nil {
		return fmt.Errorf("save relay ops of %s: %w", fixture, err)
	}
	for rung, c := range counts {
		if _, err := tx.ExecContext(ctx,
			"INSERT INTO relay_ops (fixture_id, rung, count) VALUES (?, ?, ?)", fid, rung, int64(c)); err != nil {
			return fmt.Errorf("save relay ops of %s: %w", fixture, err)
		}
	}
	if err := tx.Commit(); err != nil {
		return fmt.Errorf("save relay ops of %s: %w", fixture, markFull(err))
	}
	db.ids.merge(w.pending)
	return nil
}
