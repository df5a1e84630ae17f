package main

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"iter"
	"os"
	"strings"

	"padline/store"
	"padline/store/plant"
)

// runLog is what history and drift read: a station's shift log
// (*store.DB) or the plant store (*plant.DB), which answer the same
// queries with the same types.
type runLog interface {
	Runs(ctx context.Context, f store.Filter) iter.Seq2[*store.Entry, error]
	TripSeries(ctx context.Context, f store.Filter, last int) ([]store.TripPoint, error)
	TripValues(ctx context.Context, f store.Filter, last int) ([]store.TripPoint, error)
	Trips(ctx context.Context, f store.Filter, groups bool) iter.Seq2[store.TripPoint, error]
	Counts(ctx context.Context, f store.Filter) (store.Counts, error)
	ConfigHistory(ctx context.Context, variant string) ([]store.ConfigChange, error)
	Snapshot(ctx context.Context, variant, hash string) ([]byte, error)
	Drivers(ctx context.Context) ([]string, error)
}

var (
	_ runLog = (*store.DB)(nil)
	_ runLog = (*plant.DB)(nil)
)

// closingLog is a runLog that can be closed.
type closingLog interface {
	runLog
	Close()
}

// sqliteLog adapts store.DB's Close to closingLog.
type sqliteLog struct{ *store.DB }

func (l sqliteLog) Close() { l.DB.Close() }

// isPlantURL reports whether --db names the plant store.
func isPlantURL(s string) bool {
	return strings.HasPrefix(s, "postgres://") || strings.HasPrefix(s, "postgresql://")
}

// runLogName describes the source for reports, without a password.
func runLogName(db string) string {
	if isPlantURL(db) {
		return "plant store " + plant.Redact(db)
	}
	return "shift log " + db
}

// openRunLog opens the shift log at path, or the plant store when path is
// a postgres:// URL (checking that it answers and is migrated).
func openRunLog(ctx context.Context, path string) (closingLog, error) {
	if isPlantURL(path) {
		p, err := plant.Open(ctx, path)
		if err != nil {
			return nil, err
		}
		v, err := p.Version(ctx)
		if err != nil {
			p.Close()
			return nil, fmt.Errorf("plant store %s: %w", plant.Redact(path), err)
		}
		if v == 0 {
			p.Close()
			return nil, fmt.Errorf("plant store %s has no plant schema (run 'padline plant init --db URL')", plant.Redact(path))
		}
		return p, nil
	}
	if _, err := os.Stat(path); errors.Is(err, fs.ErrNotExist) {
		return nil, fmt.Errorf("no shift log at %s (give --db PATH or postgres://…, set PADLINE_DB, or --station-file)", path)
	}
	db, err := store.Open(path)
	if err != nil {
		return nil, err
	}
	return sqliteLog{db}, nil
}

// shiftLogOf is the station shift log behind db, nil for the plant store
// (approved baselines and per-run CSV live in the shift log only).
func shiftLogOf(db runLog) *store.DB {
	if l, ok := db.(sqliteLog); ok {
		return l.DB
	}
	return nil
}
