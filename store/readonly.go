package store

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"time"

	"github.com/mattn/go-sqlite3"
	"golang.org/x/sys/unix"
)

// ErrFolderNotWritable: the folder that holds (or is to hold) the shift
// log cannot be written, so the log cannot be created there, nor written
// (a log in WAL mode keeps its -wal and -shm files beside it).
var ErrFolderNotWritable = errors.New("store: shift log folder not writable")

// writable reports whether this process may write path (a file or a
// folder), as the kernel would decide it (access(2) with W_OK).
func writable(path string) bool {
	return unix.Access(path, unix.W_OK) == nil
}

// checkFolder refuses a log whose folder is missing or cannot be written,
// with a message that says so: SQLite's own says "unable to open database
// file: no such file or directory" for both.
func checkFolder(path string) error {
	dir := filepath.Dir(path)
	fi, err := os.Stat(dir)
	if errors.Is(err, fs.ErrNotExist) {
		return fmt.Errorf("folder %s does not exist: create it, or give --db a path in an existing folder", dir)
	}
	if err != nil {
		return err
	}
	if !fi.IsDir() {
		return fmt.Errorf("%s is not a folder", dir)
	}
	if !writable(dir) {
		what := "create the shift log"
		if _, err := os.Stat(path); err == nil {
			what = "write the shift log (SQLite keeps its -wal and -shm files beside it)"
		}
		return fmt.Errorf("%w: folder %s is not writable, so padline cannot %s; give --db a path in a writable folder or make this one writable for the station's user",
			ErrFolderNotWritable, dir, what)
	}
	return nil
}

// OpenReadOnly opens an existing shift log for reading only: history,
// drift and status use it. It never creates the log, never migrates it
// and never writes it, and it works on a file or folder this process may
// not write:
//
//   - file and folder writable: a read-write connection with
//     PRAGMA query_only, so no statement can write, and SQLite removes the
//     -wal and -shm files it needs while reading when the last connection
//     closes (a read-only connection would leave them behind);
//   - otherwise mode=ro, which reads beside a station writing the same
//     file (SQLite creates -wal and -shm when the folder allows);
//   - when even that fails (a read-only folder, so SQLite cannot create
//     the -shm file) and no -wal file holds committed runs, immutable=1:
//     nothing can write a WAL-mode log whose folder is read-only, so
//     SQLite may read the file without locks or side files ("URI
//     Filenames In SQLite", sqlite.org, section 3.3, "immutable").
//
// A log whose schema is older than this program is brought up to date by
// Open when it can be written, and refused otherwise.
func OpenReadOnly(path string) (*DB, error) {
	db, older, err := openReadOnly(path)
	if older {
		return open(path, -1)
	}
	if err != nil {
		return nil, fmt.Errorf("open shift log %s: %w", path, err)
	}
	return db, nil
}

// openReadOnly opens path read-only; older is true when the file's schema
// is older than this program's and the file can be written, so Open
// should bring it up to date.
func openReadOnly(path string) (db *DB, older bool, err error) {
	if err := checkHeader(path); err != nil {
		return nil, false, err
	}
	fi, err := os.Stat(path)
	if err != nil {
		return nil, false, err
	}
	if fi.Size() == 0 {
		return nil, false, fmt.Errorf("%w: the file is empty (no runs were ever written to it)", ErrNotShiftLog)
	}
	all, err := migrations()
	if err != nil {
		return nil, false, fmt.Errorf("read migrations: %w", err)
	}
	uri := fileURI(path) + "?_busy_timeout=10000"
	rw := writable(path) && writable(filepath.Dir(path))
	tries := []string{uri + "&mode=ro"}
	if rw {
		tries = []string{uri + "&_query_only=1"}
	} else if walEmpty(path) {
		tries = append(tries, uri+"&mode=ro&immutable=1")
	}
	var firstErr error
	for _, dsn := range tries {
		sdb, err := sql.Open("sqlite3", dsn)
		if err != nil {
			return nil, false, err
		}
		db = &DB{sql: sdb, path: path, now: time.Now, file: fi, readOnly: true, runColumns: true}
		version, fresh, err := db.identify(context.Background(), len(all))
		if err == nil && fresh {
			err = fmt.Errorf("%w: the file holds no tables (no runs were ever written to it)", ErrNotShiftLog)
		}
		if err != nil {
			sdb.Close()
			if firstErr == nil {
				firstErr = err
			}
			if cannotOpen(err) {
				continue
			}
			return nil, false, err
		}
		if int(version) < len(all) {
			sdb.Close()
			if rw {
				return nil, true, nil
			}
			return nil, false, fmt.Errorf("schema version %d is older than this padline's %d and the file cannot be written here to bring it up to date: open it once with write access (any padline command run by a user who may write it) so padline can bring it up to date",
				version, len(all))
		}
		return db, false, nil
	}
	if cannotOpen(firstErr) && !walEmpty(path) {
		return nil, false, fmt.Errorf("%w: %s-wal holds runs not yet moved into the file, and the folder %s is not writable, so SQLite cannot read them (it needs a %s-shm file): open the log once with write access to the folder",
			firstErr, path, filepath.Dir(path), filepath.Base(path))
	}
	return nil, false, firstErr
}

// cannotOpen reports whether err is SQLite failing to open or to set up
// its side files for lack of write access.
func cannotOpen(err error) bool {
	var se sqlite3.Error
	return errors.As(err, &se) && (se.Code == sqlite3.ErrReadonly || se.Code == sqlite3.ErrCantOpen)
}

// walEmpty reports whether path has no -wal file, or an empty one: then
// every committed run is in the file itself.
func walEmpty(path string) bool {
	fi, err := os.Stat(path + "-wal")
	return errors.Is(err, fs.ErrNotExist) || (err == nil && fi.Size() == 0)
}

// ReadOnly reports whether the log was opened by OpenReadOnly.
func (db *DB) ReadOnly() bool { return db.readOnly }
