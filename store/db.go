package store

import (
	"padline/sequences"

	"context"
	"database/sql"
	"embed"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path"
	"sort"
	"strings"
	"sync"
	"time"

	"github.com/mattn/go-sqlite3"
)

// ApplicationID is the value of PRAGMA application_id in every padline shift
// log ("PDLN" in ASCII). A SQLite file carrying another value is refused.
const ApplicationID = 0x50444C4E

// sqliteMagic opens every SQLite 3 database file (SQLite file format, §1.3
// "The Database Header", https://www.sqlite.org/fileformat.html).
const sqliteMagic = "SQLite format 3\x00"

// Sentinel errors of the store.
var (
	// ErrNotShiftLog: the file is not a SQLite database, or is one that
	// padline did not create.
	ErrNotShiftLog = errors.New("store: not a padline shift log")
	// ErrSchemaTooNew: the file was written by a newer padline.
	ErrSchemaTooNew = errors.New("store: shift log schema newer than this program")
	// ErrNotSaved: a run was not committed; nothing of it is in the log.
	// It is sequences.ErrNotSaved itself: one sentinel for one meaning.
	ErrNotSaved = sequences.ErrNotSaved
	// ErrDiskFull: the disk, or the log's size cap, is full.
	ErrDiskFull = errors.New("store: shift log full")
	// ErrUnknownConfig: a run names a variant configuration that was never
	// registered with PutVariant.
	ErrUnknownConfig = errors.New("store: unknown variant configuration")
	// ErrInvalidRun: a run lacks a field the log requires.
	ErrInvalidRun = errors.New("store: invalid run")
	// ErrNotFound: a looked-up item is not in the log.
	ErrNotFound = errors.New("store: not found")
	// ErrMoved: the file at the log's path is no longer the file this DB
	// has open (deleted, renamed or replaced while running): what is
	// written now would not be found at the path next time.
	ErrMoved = errors.New("store: shift log moved or deleted while open")
	// ErrCorrupt: SQLite's quick_check found damaged pages.
	ErrCorrupt = errors.New("store: shift log damaged")
)

//go:embed migrations/*.sql
var migrationFS embed.FS

// migration is one embedded schema step; version is its 1-based position.
type migration struct {
	name string
	sql  string
}

// migrations returns the embedded migrations in file-name order.
func migrations() ([]migration, error) {
	names, err := fs.Glob(migrationFS, "migrations/*.sql")
	if err != nil {
		return nil, err
	}
	sort.Strings(names)
	out := make([]migration, 0, len(names))
	for _, n := range names {
		b, err := migrationFS.ReadFile(n)
		if err != nil {
			return nil, err
		}
		out = append(out, migration{name: path.Base(n), sql: string(b)})
	}
	return out, nil
}

// SchemaVersion is the schema version this program writes: the number of
// embedded migrations.
func SchemaVersion() int {
	m, err := migrations()
	if err != nil {
		return 0
	}
	return len(m)
}

// DB is an open shift log. It is safe for concurrent use; writes from one
// DB are serialised, and other processes may read (and write) the same file.
type DB struct {
	sql  *sql.DB
	path string
	now  func() time.Time
	// file identifies the file opened at path (device and inode), so
	// CheckPath can tell when the path no longer leads to it.
	file os.FileInfo

	// runColumns is true when runs has the driver and fault columns
	// (migration 0004); a log opened at an older version for a test
	// writes without them.
	runColumns bool

	// readOnly is true for a log opened by OpenReadOnly.
	readOnly bool
	// check is this DB's part in the chain of quick_checks (checked.go).
	check checkState

	wmu sync.Mutex // serialises this process's write transactions
	ids idCache    // committed name → id lookups

	smu   sync.Mutex
	stmts map[string]*sql.Stmt // statements prepared once (see prepared)

	omu   sync.Mutex
	oconn *sql.Conn // the plant outbox's writes (see outboxConn)

	// pmu guards the outbox advance not yet committed (DeferAdvance,
	// outbox.go) and the run commit times of its idle flush. Take it
	// after wmu, never before.
	pmu        sync.Mutex
	pend       *Advance
	pendSince  time.Time // when pend was made
	lastRecord time.Time // the last run's commit
	recordGap  time.Duration
}

// Open opens the shift log at path, creating it if it does not exist, and
// brings its schema up to date. It refuses a file that is not a padline
// shift log (ErrNotShiftLog) and one whose schema is newer than this program
// (ErrSchemaTooNew).
func Open(path string) (*DB, error) {
	return open(path, -1)
}

// fileURI is path as an SQLite file: URI: '%', '?' and '#' are
// percent-escaped, so a path that contains them names the same file SQLite
// opens (a bare path would be cut at its first '?' and the rest read as
// options). SQLite decodes %HH escapes in a URI path (sqlite.org, "URI
// Filenames In SQLite", section 3.1).
func fileURI(path string) string {
	r := strings.NewReplacer("%", "%25", "?", "%3F", "#", "%23")
	return "file:" + r.Replace(path)
}

// runColumnsVersion is the schema version that adds runs.driver and
// runs.fault.
const runColumnsVersion = 4

// open opens path and migrates it to version target (-1: all migrations).
func open(path string, target int) (*DB, error) {
	if err := checkHeader(path); err != nil {
		return nil, fmt.Errorf("open shift log %s: %w", path, err)
	}
	if err := checkFolder(path); err != nil {
		return nil, fmt.Errorf("open shift log %s: %w", path, err)
	}
	// Per-connection settings go in the DSN so every pooled connection gets
	// them; WAL is persistent in the file and is set once below, after the
	// file is known to be ours.
	dsn := fileURI(path) + "?_foreign_keys=1&_synchronous=FULL&_busy_timeout=10000&_txlock=immediate"
	db := &DB{path: path, now: time.Now, runColumns: target < 0 || target >= runColumnsVersion}
	db.check.noteOpen(path) // before SQLite touches the file
	sdb, err := sql.Open("sqlite3", dsn)
	if err != nil {
		return nil, fmt.Errorf("open shift log %s: %w", path, err)
	}
	db.sql = sdb
	if err := db.prepare(context.Background(), target); err != nil {
		sdb.Close()
		return nil, fmt.Errorf("open shift log %s: %w", path, err)
	}
	// prepare wrote the file (WAL mode at least), so it exists now.
	fi, err := os.Stat(path)
	if err != nil {
		sdb.Close()
		return nil, fmt.Errorf("open shift log %s: %w", path, err)
	}
	db.file = fi
	return db, nil
}

// CheckPath returns ErrMoved unless the log's path still leads to the file
// this DB has open. A station calls it before showing a verdict: a log
// deleted or renamed under a running station would otherwise take every
// run into a file nobody will find again.
func (db *DB) CheckPath() error {
	fi, err := os.Stat(db.path)
	if err != nil {
		return fmt.Errorf("%w: %s: %w", ErrMoved, db.path, err)
	}
	if !os.SameFile(fi, db.file) {
		return fmt.Errorf("%w: %s is now another file", ErrMoved, db.path)
	}
	return nil
}

// QuickCheck runs SQLite's PRAGMA quick_check, which reads every page and
// finds damaged ones (it skips the index-content cross-checks of
// integrity_check, so it is fast enough for every station start), and
// returns ErrCorrupt with SQLite's findings when it reports anything but
// "ok".
func (db *DB) QuickCheck(ctx context.Context) error {
	err := quickCheck(ctx, db.sql, db.path)
	db.check.noteCheck(time.Now(), err)
	return err
}

// quickCheck runs PRAGMA quick_check on conn, the log at path.
func quickCheck(ctx context.Context, conn *sql.DB, path string) error {
	msgs, err := pragmaList(ctx, conn, "PRAGMA quick_check")
	if err != nil {
		if se := (sqlite3.Error{}); errors.As(err, &se) && se.Code == sqlite3.ErrCorrupt {
			return fmt.Errorf("%w: %s: %w", ErrCorrupt, path, err)
		}
		return fmt.Errorf("quick check %s: %w", path, classifyOpen(err))
	}
	if len(msgs) == 1 && msgs[0] == "ok" {
		return nil
	}
	return fmt.Errorf("%w: %s: %v", ErrCorrupt, path, msgs)
}

// checkHeader refuses anything at path that is not a regular file (a FIFO
// would block the open for ever, a directory or device is no log), and a
// non-empty file that does not start with the SQLite magic string, before
// SQLite touches it. A path that does not exist yet is a new log.
func checkHeader(path string) error {
	fi, err := os.Stat(path)
	if errors.Is(err, fs.ErrNotExist) {
		return nil
	}
	if err != nil {
		return err
	}
	if !fi.Mode().IsRegular() {
		return fmt.Errorf("%w: %s is a %s, not a regular file", ErrNotShiftLog, path, fileKind(fi.Mode()))
	}
	f, err := os.Open(path)
	if err != nil {
		return err
	}
	defer f.Close()
	buf := make([]byte, len(sqliteMagic))
	_, err = io.ReadFull(f, buf)
	if err == io.EOF {
		return nil // empty file: SQLite treats it as a new database
	}
	if err != nil || string(buf) != sqliteMagic {
		return fmt.Errorf("%w: not a SQLite database file", ErrNotShiftLog)
	}
	return nil
}

// fileKind names a non-regular file mode for an error message.
func fileKind(m fs.FileMode) string {
	switch {
	case m.IsDir():
		return "directory"
	case m&fs.ModeNamedPipe != 0:
		return "named pipe (FIFO)"
	case m&fs.ModeSocket != 0:
		return "socket"
	case m&fs.ModeDevice != 0:
		return "device"
	case m&fs.ModeSymlink != 0:
		return "symbolic link"
	}
	return "special file"
}

// prepare checks the file's identity and version, switches it to WAL and
// applies the pending migrations.
func (db *DB) prepare(ctx context.Context, target int) error {
	all, err := migrations()
	if err != nil {
		return fmt.Errorf("read migrations: %w", err)
	}
	if target < 0 || target > len(all) {
		target = len(all)
	}
	version, _, err := db.identify(ctx, len(all))
	if err != nil {
		return err
	}
	var mode string
	if err := db.sql.QueryRowContext(ctx, "PRAGMA journal_mode=WAL").Scan(&mode); err != nil {
		return fmt.Errorf("set WAL: %w", err)
	}
	if mode != "wal" {
		return fmt.Errorf("set WAL: journal mode is %q", mode)
	}
	for v := int(version); v < target; v++ {
		if err := db.migrate(ctx, v+1, all[v]); err != nil {
			return err
		}
	}
	return nil
}

// identify reads the file's application_id, schema version and number of
// schema objects, and refuses a file padline did not create
// (ErrNotShiftLog) or one written by a newer padline (ErrSchemaTooNew).
// fresh is true for a new, empty database.
func (db *DB) identify(ctx context.Context, known int) (version int64, fresh bool, err error) {
	var appID, objects int64
	if err := db.sql.QueryRowContext(ctx, "PRAGMA application_id").Scan(&appID); err != nil {
		return 0, false, classifyOpen(err)
	}
	if err := db.sql.QueryRowContext(ctx, "PRAGMA user_version").Scan(&version); err != nil {
		return 0, false, classifyOpen(err)
	}
	if err := db.sql.QueryRowContext(ctx, "SELECT count(*) FROM sqlite_schema").Scan(&objects); err != nil {
		return 0, false, classifyOpen(err)
	}
	switch {
	case appID == ApplicationID:
	case appID == 0 && version == 0 && objects == 0:
		fresh = true // a new, empty database: ours to initialise
	default:
		return 0, false, fmt.Errorf("%w: application_id %#x (want %#x), user_version %d, %d schema objects",
			ErrNotShiftLog, appID, ApplicationID, version, objects)
	}
	if version < 0 {
		return 0, false, fmt.Errorf("%w: schema version %d is negative; padline never writes that", ErrNotShiftLog, version)
	}
	if version > int64(known) {
		return 0, false, fmt.Errorf("%w: file has schema version %d, this padline knows versions up to %d",
			ErrSchemaTooNew, version, known)
	}
	return version, fresh, nil
}

// migrate applies migration m as schema version v in one transaction. It
// re-reads the version inside the transaction, so two processes opening a
// new file at once apply each migration once.
func (db *DB) migrate(ctx context.Context, v int, m migration) error {
	tx, err := db.sql.BeginTx(ctx, nil)
	if err != nil {
		return fmt.Errorf("migration %s: %w", m.name, err)
	}
	defer tx.Rollback()
	var cur int
	if err := tx.QueryRowContext(ctx, "PRAGMA user_version").Scan(&cur); err != nil {
		return fmt.Errorf("migration %s: %w", m.name, err)
	}
	if cur >= v {
		return nil
	}
	if cur != v-1 {
		return fmt.Errorf("migration %s: file at version %d, want %d", m.name, cur, v-1)
	}
	if _, err := tx.ExecContext(ctx, m.sql); err != nil {
		return fmt.Errorf("migration %s: %w", m.name, err)
	}
	if v == 1 {
		if _, err := tx.ExecContext(ctx, fmt.Sprintf("PRAGMA application_id = %d", ApplicationID)); err != nil {
			return fmt.Errorf("migration %s: %w", m.name, err)
		}
	}
	if _, err := tx.ExecContext(ctx, fmt.Sprintf("PRAGMA user_version = %d", v)); err != nil {
		return fmt.Errorf("migration %s: %w", m.name, err)
	}
	if err := tx.Commit(); err != nil {
		return fmt.Errorf("migration %s: %w", m.name, err)
	}
	return nil
}

// classifyOpen turns SQLite's "not a database" into ErrNotShiftLog.
func classifyOpen(err error) error {
	var se sqlite3.Error
	if errors.As(err, &se) && se.Code == sqlite3.ErrNotADB {
		return fmt.Errorf("%w: %w", ErrNotShiftLog, err)
	}
	return err
}

// isFull reports whether err is SQLite's "database or disk is full".
func isFull(err error) bool {
	var se sqlite3.Error
	return errors.As(err, &se) && se.Code == sqlite3.ErrFull
}

// markFull wraps err in ErrDiskFull when it is SQLite's "database or disk
// is full", and returns it unchanged otherwise.
func markFull(err error) error {
	if isFull(err) {
		return fmt.Errorf("%w: %w", ErrDiskFull, err)
	}
	return err
}

// Close closes the shift log. Runs already recorded stay committed. It
// stops a background check, and after the close of a log known sound it
// writes the check record that lets the next start skip quick_check
// (checked.go).
func (db *DB) Close() error {
	db.check.stopCheck()
	// A landed batch's cursor still in memory (DeferAdvance): written now,
	// or its batch is sent again next time.
	ferr := db.FlushOutbox(context.Background())
	db.closeOutboxConn()
	err := db.sql.Close()
	if err == nil && !db.readOnly {
		db.check.writeRecord(db.path)
	}
	return errors.Join(ferr, err)
}

// Path returns the file the log was opened from.
func (db *DB) Path() string { return db.path }

// Version returns the schema version of the open file.
func (db *DB) Version(ctx context.Context) (int, error) {
	var v int
	err := db.sql.QueryRowContext(ctx, "PRAGMA user_version").Scan(&v)
	return v, err
}

// IntegrityCheck runs PRAGMA integrity_check and returns nil when SQLite
// reports "ok".
func (db *DB) IntegrityCheck(ctx context.Context) error {
	msgs, err := pragmaList(ctx, db.sql, "PRAGMA integrity_check")
	if err != nil {
		return fmt.Errorf("integrity check: %w", err)
	}
	if len(msgs) == 1 && msgs[0] == "ok" {
		return nil
	}
	return fmt.Errorf("integrity check: %v", msgs)
}

// pragmaList runs a PRAGMA that returns one text column and collects it.
func pragmaList(ctx context.Context, conn *sql.DB, q string) ([]string, error) {
	rows, err := conn.QueryContext(ctx, q)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	var msgs []string
	for rows.Next() {
		var s string
		if err := rows.Scan(&s); err != nil {
			return nil, err
		}
		msgs = append(msgs, s)
	}
	return msgs, rows.Err()
}

// idCache remembers committed name → id mappings of the small lookup tables.
type idCache struct {
	mu sync.Mutex
	m  map[string]int64
}

func (c *idCache) get(key string) (int64, bool) {
	c.mu.Lock()
	defer c.mu.Unlock()
	id, ok := c.m[key]
	return id, ok
}

func (c *idCache) merge(pending map[string]int64) {
	if len(pending) == 0 {
		return
	}
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.m == nil {
		c.m = make(map[string]int64)
	}
	for k, v := range pending {
		c.m[k] = v
	}
}

// Unwritable reports whether err is a write failure that can clear without
// a change to the program: the disk (or the log's size cap) is full, the log
// is locked by another process past the busy timeout, or the file cannot be
// written for now (read-only, I/O error). A station holds a unit's run and
// tries again rather than testing the unit again.
func Unwritable(err error) bool {
	if errors.Is(err, ErrDiskFull) {
		return true
	}
	var se sqlite3.Error
	if !errors.As(err, &se) {
		return false
	}
	switch se.Code {
	case sqlite3.ErrFull, sqlite3.ErrBusy, sqlite3.ErrLocked, sqlite3.ErrReadonly, sqlite3.ErrIoErr, sqlite3.ErrCantOpen:
		return true
	}
	return false
}
