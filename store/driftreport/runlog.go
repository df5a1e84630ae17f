package driftreport

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"iter"
	"os"
	"time"

	"padline/sequences/session"
	"padline/store"
	"padline/store/plant"
)

// runLog is what drift reads: a station's shift log (*store.DB) or the
// plant store (*plant.DB), which answer the same queries with the same
// types.
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

// sourceName describes the source for reports, without a password.
func sourceName(db string) string {
	if plant.IsURL(db) {
		return "plant store " + plant.Redact(db)
	}
	return "shift log " + db
}

// openLog opens the shift log (never creating one), or the plant store
// when o.DB is a postgres:// URL, and narrows the filter to the drivers
// the view keeps. close releases it.
func openLog(ctx context.Context, o *Options) (db runLog, close func(), err error) {
	if plant.IsURL(o.DB) {
		p, err := plant.OpenMigrated(ctx, o.DB)
		if err != nil {
			return nil, nil, fmt.Errorf("drift: %w", err)
		}
		db, close = p, p.Close
	} else {
		if _, err := os.Stat(o.DB); errors.Is(err, fs.ErrNotExist) {
			return nil, nil, fmt.Errorf("drift: no shift log at %s (give --db PATH or postgres://…, set PADLINE_DB, or --station-file)", o.DB)
		}
		s, err := store.OpenReadOnly(o.DB)
		if err != nil {
			return nil, nil, fmt.Errorf("drift: %w", err)
		}
		db, close = s, func() { s.Close() }
	}
	if o.Filter.Driver, err = session.DriverFilter(ctx, db, o.IncludeSimulated); err != nil {
		close()
		return nil, nil, fmt.Errorf("drift: %w", err)
	}
	return db, close, nil
}

// baselineLog is a log that keeps approved baselines: a station's shift
// log or the plant store, each holding the baselines approved on it
// (DEVELOPERS.md "Approved baselines on the plant").
type baselineLog interface {
	runLog
	LastBaseline(ctx context.Context, variant string) (store.Baseline, error)
	SetBaseline(ctx context.Context, b store.Baseline) (int64, error)
}

var (
	_ baselineLog = (*store.DB)(nil)
	_ baselineLog = (*plant.DB)(nil)
)

// runAt looks up one run (found by its finish time, an indexed range of
// one nanosecond); the zero Entry when it cannot be found.
func runAt(ctx context.Context, db runLog, variant string, id int64, at time.Time) store.Entry {
	for e, err := range db.Runs(ctx, store.Filter{Variant: variant, Since: at, Until: at.Add(1)}) {
		if err != nil {
			return store.Entry{}
		}
		if e.ID == id {
			return *e
		}
	}
	return store.Entry{}
}
