package store_test

import (
	"context"
	"database/sql"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"syscall"
	"testing"
	"time"

	_ "github.com/mattn/go-sqlite3"

	"padline/store"
)

// A check stamped in the future by a wrong clock must not hide a failed
// check recorded after it: the last check is the last one inserted.
func TestLastCheckByInsertion(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	future := store.StationCheck{Time: t0.Add(30 * 24 * time.Hour), Station: "L2-S1", Fixture: "FX-07",
		StationHash: "aa", OK: true, Details: json.RawMessage(`{}`)}
	failed := future
	failed.Time, failed.OK = t0, false
	for _, c := range []store.StationCheck{future, failed} {
		if _, err := db.RecordCheck(ctx, c); err != nil {
			t.Fatal(err)
		}
	}
	got, err := db.LastCheck(ctx, "L2-S1", "FX-07")
	if err != nil {
		t.Fatal(err)
	}
	if got.OK {
		t.Fatalf("last check is the future-stamped pass; want the failed check recorded after it")
	}
	late, err := db.LatestTime(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if !late.Equal(future.Time) {
		t.Errorf("LatestTime %v, want the future stamp %v", late, future.Time)
	}
}

func TestLatestTimeEmptyAndRuns(t *testing.T) {
	ctx := context.Background()
	db, _ := openTemp(t)
	if late, err := db.LatestTime(ctx); err != nil || !late.IsZero() {
		t.Fatalf("LatestTime of an empty log: %v, %v", late, err)
	}
	hash := putDemo(t, db)
	r := demoRun(7, hash)
	if _, err := db.Record(ctx, r); err != nil {
		t.Fatal(err)
	}
	if late, err := db.LatestTime(ctx); err != nil || !late.Equal(r.Finished) {
		t.Fatalf("LatestTime %v, %v; want the run's finish %v", late, err, r.Finished)
	}
}

// A log deleted, renamed or replaced while open is noticed before a verdict.
func TestCheckPath(t *testing.T) {
	for _, tc := range []struct {
		name string
		do   func(path string) error
	}{
		{"deleted", os.Remove},
		{"renamed", func(p string) error { return os.Rename(p, p+".old") }},
		{"replaced", func(p string) error {
			if err := os.Rename(p, p+".old"); err != nil {
				return err
			}
			return os.WriteFile(p, nil, 0o644)
		}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			db, path := openTemp(t)
			if err := db.CheckPath(); err != nil {
				t.Fatalf("fresh log: %v", err)
			}
			if err := tc.do(path); err != nil {
				t.Fatal(err)
			}
			if err := db.CheckPath(); !errors.Is(err, store.ErrMoved) {
				t.Fatalf("CheckPath after the log was %s: %v, want ErrMoved", tc.name, err)
			}
		})
	}
}

// A FIFO (or directory) given as the log is refused before anything opens
// it: opening a FIFO would block for ever.
func TestOpenRefusesNonRegular(t *testing.T) {
	dir := t.TempDir()
	fifo := filepath.Join(dir, "pipe.db")
	if err := syscall.Mkfifo(fifo, 0o644); err != nil {
		t.Skipf("mkfifo: %v", err)
	}
	done := make(chan error, 1)
	go func() {
		_, err := store.Open(fifo)
		done <- err
	}()
	select {
	case err := <-done:
		if !errors.Is(err, store.ErrNotShiftLog) {
			t.Errorf("Open(FIFO): %v, want ErrNotShiftLog", err)
		}
	case <-time.After(20 * time.Second):
		t.Fatal("Open(FIFO) blocked")
	}
	if _, err := store.Open(dir); !errors.Is(err, store.ErrNotShiftLog) {
		t.Errorf("Open(directory): %v, want ErrNotShiftLog", err)
	}
}

// A negative schema version (PRAGMA user_version = -1) is refused, not a
// panic on a negative slice index.
func TestOpenNegativeVersion(t *testing.T) {
	_, path := openTemp(t)
	raw, err := sql.Open("sqlite3", path)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := raw.Exec("PRAGMA user_version = -1"); err != nil {
		t.Fatal(err)
	}
	raw.Close()
	if _, err := store.Open(path); !errors.Is(err, store.ErrNotShiftLog) {
		t.Fatalf("Open with user_version -1: %v, want ErrNotShiftLog", err)
	}
}

// quick_check finds a damaged data page that a plain open accepts.
func TestQuickCheckFindsDamage(t *testing.T) {
	ctx := context.Background()
	db, path := openTemp(t)
	hash := putDemo(t, db)
	for i := range 400 {
		if _, err := db.Record(ctx, demoRun(i, hash)); err != nil {
			t.Fatal(err)
		}
	}
	if err := db.QuickCheck(ctx); err != nil {
		t.Fatalf("healthy log: %v", err)
	}
	// Closing the last connection checkpoints the WAL into the file; then
	// damage a page in the middle of the file (not the header page).
	db.Close()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	page := 4096
	if len(b) < 8*page {
		t.Fatalf("log too small to damage: %d bytes", len(b))
	}
	mid := (len(b) / page / 2) * page
	for i := mid + 8; i < mid+page; i++ {
		b[i] = 0xA5
	}
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
	db2, err := store.Open(path)
	if err != nil {
		t.Logf("damage already refused at open: %v", err) // detected either way
		return
	}
	defer db2.Close()
	if err := db2.QuickCheck(ctx); !errors.Is(err, store.ErrCorrupt) {
		t.Fatalf("QuickCheck on a damaged log: %v, want ErrCorrupt", err)
	}
}

// A full disk is a write failure that can clear; a missing item is not.
func TestUnwritable(t *testing.T) {
	if !store.Unwritable(fmt.Errorf("record: %w", store.ErrDiskFull)) {
		t.Error("ErrDiskFull not unwritable")
	}
	if store.Unwritable(store.ErrNotFound) || store.Unwritable(nil) {
		t.Error("ErrNotFound or nil unwritable")
	}
}
