package session

import (
	"context"
	"fmt"
	"time"

	"padline/sequences"
	"padline/store"
)

// holdRetry is how often a station halted by an unwritable shift log tries
// to write the held run again.
var holdRetry = 2 * time.Second

// holdingRecorder records runs in the shift log. When the log cannot be
// written (disk full, locked, read-only) it does not give the run up: it
// announces the halted station (KindStationHalted: the terminal and the
// screen say why and what to do), keeps the fixture halted and writes the
// same run again every holdRetry until it succeeds (KindStationResumed, then
// the verdict as usual) or the session is stopped. The tested unit is never
// retested silently on the next start because its run was dropped.
type holdingRecorder struct {
	s  *Session
	db logWriter
}

// logWriter is what holdingRecorder needs of the shift log (*store.DB).
type logWriter interface {
	sequences.Recorder
	sequences.PriorRuns
}

var _ sequences.PriorRuns = holdingRecorder{}

func (h holdingRecorder) PriorRuns(ctx context.Context, serial string) (int, int, error) {
	return h.db.PriorRuns(ctx, serial)
}

func (h holdingRecorder) Record(ctx context.Context, r *sequences.Run) (int64, error) {
	id, err := h.db.Record(ctx, r)
	if err == nil || !store.Unwritable(err) {
		return id, err
	}
	s := h.s
	stop := s.runCtx
	if stop == nil {
		stop = context.Background()
	}
	ref := &Refusal{
		Why: fmt.Sprintf("shift log %s cannot be written (%v): unit %s is tested but its %s is NOT saved yet and not shown", s.opts.ShiftLog, err, r.Serial, r.Verdict),
		Fix: fmt.Sprintf("free disk space on the log's disk or end the program holding the log; the station saves the unit by itself (every %s) and then shows its verdict; leave %s in the fixture", holdRetry, r.Serial),
		Err: fmt.Errorf("%w: %w", ErrHalted, err),
	}
	s.emit(Event{Kind: KindStationHalted, Refused: ref})
	_ = s.rig.Halt()
	t := time.NewTicker(holdRetry)
	defer t.Stop()
	for {
		select {
		case <-stop.Done():
			return 0, fmt.Errorf("stopped while the shift log could not be written: %w", err)
		case <-t.C:
		}
		id, err = h.db.Record(ctx, r)
		if err == nil {
			s.emit(Event{Kind: KindStationResumed, Scan: &Scan{Serial: r.Serial}})
			return id, nil
		}
		if !store.Unwritable(err) {
			return 0, err
		}
	}
}
