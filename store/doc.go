// Package store is the SQLite shift log: schema, embedded migrations, run
// writes and history queries. It is the only padline package that imports
// database/sql and the SQLite driver (github.com/mattn/go-sqlite3); of
// padline it imports only sequences, for the Run, Measurement and Verdict
// types. It must not import fixture, cmd or store/drift.
//
// # Durability
//
// Open sets WAL journaling, foreign keys, synchronous=FULL and a busy
// timeout. Record writes a run and all its measurements in one transaction
// and returns only after the commit; when it returns an error the run is not
// in the log (errors.Is(err, ErrNotSaved)), so a station must not show a
// verdict for it.
//
// # Schema
//
// The schema lives in migrations/NNNN_*.sql, embedded and applied at Open in
// order, one transaction each; PRAGMA user_version holds the number of
// migrations applied and PRAGMA application_id marks the file as a padline
// shift log. Times are stored as integer nanoseconds since the Unix epoch
// (UTC); in the sqlite3 shell, datetime(finished/1e9, 'unixepoch') shows
// them. A run refers to the exact variant configuration (snapshot bytes and
// hex SHA-256) registered with PutVariant, so every verdict is traceable to
// the limits that produced it.
//
// # Long series
//
// Trips streams a variant's trip series oldest first, and TripSeries reads
// its last points, from the index runs_variant_trip alone (migration
// 0006): it holds every column they read, in (variant, finished, id)
// order, so SQLite neither visits the table nor sorts, and rows are read
// from the driver without database/sql's per-value conversion. Counts
// finds each run's first unit verdict with one probe of the covering index
// runs_serial_verdict. Building the two indexes on an existing log is done
// once, at the first Open after the upgrade: seconds for a million runs.
//
// # Exports
//
// WriteCSV is flat: one row per measurement, the run's columns repeated on
// each (a run without measurements gives one row with empty measurement
// columns). WriteJSONL is nested: one JSON object per run with its
// measurements in an array. Both stream row by row from one SELECT.
package store
