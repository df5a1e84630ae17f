package history

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"iter"
	"os"

	"padline/store"
	"padline/store/plant"
)

// runLog is what history reads: a station's shift log (*store.DB) or the
// plant store (*plant.DB), which answer the same queries with the same
// types.
type runLog interface {
	Runs(ctx context.Context, f store.Filter) iter.Seq2[*store.Entry, error]
	ConfigHistory(ctx context.Context, variant string) ([]store.ConfigChange, error)
	Drivers(ctx context.Context) ([]string, error)
}

var (
	_ runLog = (*store.DB)(nil)
	_ runLog = (*plant.DB)(nil)
)

// openLog opens the shift log at path (never creating one), or the plant
// store when path is a postgres:// URL; close releases it.
func openLog(ctx context.Context, path string) (runLog, func(), error) {
	if plant.IsURL(path) {
		p, err := plant.OpenMigrated(ctx, path)
		if err != nil {
			return nil, nil, err
		}
		return p, p.Close, nil
	}
	if _, err := os.Stat(path); errors.Is(err, fs.ErrNotExist) {
		return nil, nil, fmt.Errorf("no shift log at %s (give --db PATH or postgres://…, set PADLINE_DB, or --station-file)", path)
	}
	db, err := store.OpenReadOnly(path)
	if err != nil {
		return nil, nil, err
	}
	return db, func() { db.Close() }, nil
}
