package store

import (
	"context"
	"database/sql"
	"encoding/json"
	"errors"
	"os"
	"sync"
	"time"

	"golang.org/x/sys/unix"
)

// The check record: why a station start need not read a large log whole.
//
// quick_check reads every page (27.8 s on a 1,000,000-run log), so a start
// skips it when the file is, byte for byte, what the last clean close of a
// checked log left: the record beside the log (path + CheckRecordSuffix)
// holds the file's device, inode, size, and modification and status-change
// times to the nanosecond, written after that close. Anything else that
// writes the file changes its status-change time, which no user can set
// (stat(2), "st_ctime"); a copy or a rename changes the inode. A start that
// finds the file so runs the check in the background instead (damage the
// disk itself made) and the station halts when it finds any; any other
// start checks in the foreground before the first unit.

// CheckRecordSuffix names the check record beside a shift log.
const CheckRecordSuffix = "-checked"

// fileState is what the check record compares.
type fileState struct {
	Dev     uint64 `json:"dev"`
	Ino     uint64 `json:"ino"`
	Size    int64  `json:"size"`
	MtimeNs int64  `json:"mtime_ns"`
	CtimeNs int64  `json:"ctime_ns"`
}

// checkRecord is the record's content: the file's state after the last
// clean close, and when the last quick_check of the chain that led to it
// found the file sound.
type checkRecord struct {
	File    fileState `json:"file"`
	Checked time.Time `json:"checked"`
}

func statFile(path string) (fileState, error) {
	var st unix.Stat_t
	if err := unix.Stat(path, &st); err != nil {
		return fileState{}, err
	}
	return fileState{Dev: uint64(st.Dev), Ino: uint64(st.Ino), Size: st.Size,
		MtimeNs: st.Mtim.Nano(), CtimeNs: st.Ctim.Nano()}, nil
}

// checkState is a DB's part in the chain of checks.
type checkState struct {
	mu sync.Mutex
	// pristine: at open, the file matched its check record and no -wal
	// file held runs; fresh: this open created the file.
	pristine, fresh bool
	// checked is when a quick_check on this DB (or the record's) found the
	// file sound; zero when none did.
	checked time.Time
	// damage is what a quick_check found; nil when none ran or it passed.
	damage error
	// bg: a background check running; cancel stops it, done closes when
	// it has returned.
	cancel context.CancelFunc
	done   chan struct{}
}

// noteOpen reads the check record before SQLite touches the file.
func (c *checkState) noteOpen(path string) {
	before, err := statFile(path)
	if err != nil || before.Size == 0 {
		c.fresh = true // no file yet (or an empty one): this open makes the log
		return
	}
	b, err := os.ReadFile(path + CheckRecordSuffix)
	if err != nil {
		return
	}
	var rec checkRecord
	if json.Unmarshal(b, &rec) != nil || rec.Checked.IsZero() {
		return
	}
	if rec.File == before && walEmpty(path) {
		c.pristine, c.checked = true, rec.Checked
	}
}

// Pristine reports, without opening the log, whether the file at path is
// exactly what the last clean close of a checked log left, and when that
// log was last found sound.
func Pristine(path string) (bool, time.Time) {
	var c checkState
	c.noteOpen(path)
	return c.pristine, c.checked
}

// Pristine reports whether the file, when opened, was exactly what the
// last clean close of a checked log left (see CheckRecordSuffix), and
// when that log was last found sound. A start that sees it may run
// CheckInBackground instead of QuickCheck.
func (db *DB) Pristine() (bool, time.Time) {
	c := &db.check
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.pristine, c.checked
}

// CheckInBackground runs QuickCheck on its own connection while the log is
// in use; Damage reports what it found. Close stops it.
func (db *DB) CheckInBackground() {
	c := &db.check
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.done != nil {
		return
	}
	ctx, cancel := context.WithCancel(context.Background())
	c.cancel, c.done = cancel, make(chan struct{})
	go func() {
		defer close(c.done)
		// Its own read-only connection: Close interrupts it, and an
		// interrupted connection must not be the one whose close moves
		// the -wal file's runs into the log (the interrupt would cut that
		// short and leave the -wal behind, so the next start would not
		// find the log pristine).
		ro, err := sql.Open("sqlite3", fileURI(db.path)+"?mode=ro&_busy_timeout=10000")
		if err != nil {
			return
		}
		defer ro.Close()
		ro.SetMaxOpenConns(1)
		c.noteCheck(time.Now(), quickCheck(ctx, ro, db.path))
	}()
}

// Damage returns ErrCorrupt (with SQLite's findings) once a quick_check on
// this DB has found damage, nil otherwise.
func (db *DB) Damage() error {
	c := &db.check
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.damage
}

// WaitCheck waits for a background check to end (nil when none runs) and
// returns Damage.
func (db *DB) WaitCheck(ctx context.Context) error {
	c := &db.check
	c.mu.Lock()
	done := c.done
	c.mu.Unlock()
	if done != nil {
		select {
		case <-done:
		case <-ctx.Done():
			return ctx.Err()
		}
	}
	return db.Damage()
}

// noteCheck records a finished quick_check's result.
func (c *checkState) noteCheck(at time.Time, err error) {
	c.mu.Lock()
	defer c.mu.Unlock()
	switch {
	case err == nil:
		c.checked = at
	case errors.Is(err, ErrCorrupt):
		c.damage = err
	}
}

// stopCheck stops a background check and waits for it.
func (c *checkState) stopCheck() {
	c.mu.Lock()
	cancel, done := c.cancel, c.done
	c.mu.Unlock()
	if cancel != nil {
		cancel()
		<-done
	}
}

// writeRecord writes the check record after a clean close, when the file
// came from a sound log (checked by this DB or pristine at open, or new)
// and no check found damage; otherwise it removes a record that no longer
// holds. Failing to write it only costs the next start a foreground check.
func (c *checkState) writeRecord(path string) {
	rec := path + CheckRecordSuffix
	c.mu.Lock()
	damaged := c.damage != nil
	sound := !damaged && (c.pristine || c.fresh || !c.checked.IsZero())
	checked := c.checked
	c.mu.Unlock()
	if damaged {
		_ = os.Remove(rec)
		return
	}
	if checked.IsZero() {
		checked = time.Now() // created by this open: nothing else wrote it
	}
	st, err := statFile(path)
	if !sound || err != nil || !walEmpty(path) {
		// Unchecked, or another connection still holds runs in the -wal
		// file: no record. One left from before no longer matches the
		// file once anything wrote it.
		return
	}
	b, err := json.Marshal(checkRecord{File: st, Checked: checked.UTC()})
	if err != nil {
		return
	}
	tmp := rec + ".tmp"
	if err := os.WriteFile(tmp, append(b, '\n'), 0o644); err != nil {
		return
	}
	if err := os.Rename(tmp, rec); err != nil {
		_ = os.Remove(tmp)
		return
	}
	// Another process that writes the log after the stat above changes
	// its state, so the record no longer matches: the safe side.
}
