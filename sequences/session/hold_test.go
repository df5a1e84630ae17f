package session

import (
	"context"
	"errors"
	"fmt"
	"path/filepath"
	"sync/atomic"
	"testing"
	"time"

	"padline/sequences"
	"padline/store"
)

// fullLog fails the first n writes as a full disk does.
type fullLog struct {
	*store.DB
	n atomic.Int32
}

func (f *fullLog) Record(ctx context.Context, r *sequences.Run) (int64, error) {
	if f.n.Add(-1) >= 0 {
		return 0, fmt.Errorf("record %s: %w: database or disk is full", r.Serial, store.ErrDiskFull)
	}
	return f.DB.Record(ctx, r)
}

// A full disk (or a locked log) halts the station with a message for the
// operator; the tested unit's run is held and written once the log takes
// it, then its verdict is shown: no exit, no silent retest on a restart.
func TestUnwritableLogHoldsRun(t *testing.T) {
	old := holdRetry
	holdRetry = 10 * time.Millisecond
	defer func() { holdRetry = old }()
	ctx := context.Background()
	s, err := Open(ctx, Options{Variant: "QM-205", Station: "demo-sim", ShiftLog: filepath.Join(t.TempDir(), "shift.db")})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	if rep, err := s.Check(ctx); err != nil || !rep.OK {
		t.Fatalf("check %+v %v", rep, err)
	}
	fl := &fullLog{DB: s.db}
	fl.n.Store(3)
	s.seq.Recorder = holdingRecorder{s: s, db: fl}
	ch, _ := s.Subscribe(1024)
	if err := s.Run(ctx, OneSerial("QM205-000001")); err != nil {
		t.Fatalf("Run with a disk full for 3 writes: %v, want the run held and saved", err)
	}
	s.Close()
	var seen []Kind
	var halted *Refusal
	for e := range ch {
		switch e.Kind {
		case KindStationHalted, KindStationResumed, KindVerdictCommitted:
			seen = append(seen, e.Kind)
		}
		if e.Kind == KindStationHalted {
			halted = e.Refused
		}
	}
	want := []Kind{KindStationHalted, KindStationResumed, KindVerdictCommitted}
	if fmt.Sprint(seen) != fmt.Sprint(want) {
		t.Fatalf("events %v, want %v", seen, want)
	}
	if halted.Why == "" || halted.Fix == "" {
		t.Errorf("halt without words for the operator: %+v", halted)
	}
	db, err := store.Open(s.opts.ShiftLog)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if tested, _, err := db.PriorRuns(ctx, "QM205-000001"); err != nil || tested != 1 {
		t.Fatalf("%d runs of the unit in the log (%v), want 1", tested, err)
	}
}

// The lid must open between two units: a serial scanned while the last
// tested unit is still clamped (lid never opened) is refused after a
// prompt; once the lid has opened (seen even while waiting for the scan)
// the next unit goes on.
func TestLidMustOpenBetweenUnits(t *testing.T) {
	ctx := context.Background()
	s, err := Open(ctx, Options{Variant: "QM-205", Station: "demo-sim", ShiftLog: filepath.Join(t.TempDir(), "shift.db"), LidTimeout: 2 * time.Second})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	ch, _ := s.Subscribe(64)
	s.rig.Line.Load("QM205-000001") // the tested unit stays in, lid shut
	s.needOpen.Store(true)
	if err := s.lidOpened(ctx, "QM205-000002"); !errors.Is(err, ErrLidNotOpened) {
		t.Fatalf("next unit with the lid never opened: %v, want ErrLidNotOpened", err)
	}
	if e := <-ch; e.Kind != KindLidWait || e.Scan.Prompt == "" {
		t.Errorf("event %s %+v, want a lid_wait asking to open the lid", e.Kind, e.Scan)
	}
	s.rig.Line.Unload() // the operator opens the lid while the station waits for a scan
	stop := s.watchLid()
	deadline := time.Now().Add(5 * time.Second)
	for s.needOpen.Load() && time.Now().Before(deadline) {
		time.Sleep(10 * time.Millisecond)
	}
	stop()
	if s.needOpen.Load() {
		t.Fatal("the lid opened while waiting for a scan, not seen")
	}
	s.rig.Line.Load("QM205-000002")
	if err := s.lidOpened(ctx, "QM205-000002"); err != nil {
		t.Fatalf("after the lid opened: %v", err)
	}
}
