package session

import (
	"context"
	"errors"
	"fmt"
	"time"

	"padline/store"
)

// Bench is a station opened for a trust command (reference check, study):
// the rig and its shift log, with the relay counts loaded from the log.
type Bench struct {
	*Rig
	DB *store.DB
}

// OpenBench loads variant and station, opens the rig and the shift log at
// dbPath, and loads the fixture's relay counts. Close it on every path.
func OpenBench(ctx context.Context, variant, station, dbPath string, o RigOptions) (*Bench, error) {
	r, err := OpenRig(ctx, variant, station, dbPath, o)
	if err != nil {
		return nil, err
	}
	db, err := store.Open(dbPath)
	if err != nil {
		return nil, errors.Join(err, r.Halt())
	}
	b := &Bench{Rig: r, DB: db}
	if err := LoadRelayWear(ctx, db, r); err != nil {
		return nil, errors.Join(err, b.Close(ctx))
	}
	// A trust command records the limits the station's files give now as a
	// limits version (limitsver.go), so a changed variant file or U waits
	// for approval from the first command that sees it.
	if _, err := SyncLimits(ctx, db, r, time.Now()); err != nil {
		return nil, errors.Join(err, b.Close(ctx))
	}
	return b, nil
}

// Close halts the fixture, saves the relay counts and closes the log.
func (b *Bench) Close(ctx context.Context) error {
	herr := b.Halt()
	serr := SaveRelayWear(ctx, b.DB, b.Rig)
	cerr := b.DB.Close()
	if err := errors.Join(herr, serr, cerr); err != nil {
		return fmt.Errorf("close station: %w", err)
	}
	return nil
}
