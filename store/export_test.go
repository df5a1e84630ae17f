package store

// Bridges for the black-box tests in package store_test.

import (
	"context"
	"fmt"
	"strings"
	"time"
)

// OpenVersion opens path and migrates it only up to schema version v, to
// build old-schema files.
func OpenVersion(path string, v int) (*DB, error) { return open(path, v) }

// LimitPages caps the file at n pages on the only connection the pool may
// use from now on (PRAGMA max_page_count is per connection).
func LimitPages(db *DB, extra int64) error {
	db.sql.SetMaxOpenConns(1)
	var pages int64
	if err := db.sql.QueryRow("PRAGMA page_count").Scan(&pages); err != nil {
		return err
	}
	var got int64
	if err := db.sql.QueryRow(fmt.Sprintf("PRAGMA max_page_count = %d", pages+extra)).Scan(&got); err != nil {
		return err
	}
	if got != pages+extra {
		return fmt.Errorf("max_page_count %d, want %d", got, pages+extra)
	}
	return nil
}

// Exec runs a statement on the log, for tests that corrupt or inspect it.
func Exec(db *DB, q string, args ...any) error {
	_, err := db.sql.Exec(q, args...)
	return err
}

// QueryInt runs a query returning one integer.
func QueryInt(db *DB, q string, args ...any) (int64, error) {
	var n int64
	err := db.sql.QueryRow(q, args...).Scan(&n)
	return n, err
}

// RunsPlan returns SQLite's query plan for Runs(f), one line per step.
func RunsPlan(db *DB, f Filter) (string, error) {
	cond, args := f.where()
	rows, err := db.sql.QueryContext(context.Background(),
		"EXPLAIN QUERY PLAN "+fmt.Sprintf(runsSQL, cond), args...)
	if err != nil {
		return "", err
	}
	defer rows.Close()
	var b strings.Builder
	for rows.Next() {
		var id, parent, notused int
		var detail string
		if err := rows.Scan(&id, &parent, &notused, &detail); err != nil {
			return "", err
		}
		b.WriteString(detail + "\n")
	}
	return b.String(), rows.Err()
}

// SetNow replaces the clock PutVariant stamps first_seen with.
func SetNow(db *DB, now func() time.Time) { db.now = now }

// QueryText runs a query returning one string.
func QueryText(db *DB, q string, args ...any) (string, error) {
	var s string
	err := db.sql.QueryRow(q, args...).Scan(&s)
	return s, err
}

// DriftPlans returns SQLite's query plans of the trip series (oldest
// first, newest first, with and without the group columns) and of Counts
// for f, by name.
func DriftPlans(db *DB, f Filter) (map[string]string, error) {
	cond, args := f.where()
	out := map[string]string{}
	for name, q := range map[string]string{
		"trips":             tripsSQL(cond, false, false),
		"trips, groups":     tripsSQL(cond, false, true),
		"last trips":        tripsSQL(cond, true, false),
		"last trips, group": tripsSQL(cond, true, true),
		"counts":            countsSQL(cond, ""),
	} {
		rows, err := db.sql.Query("EXPLAIN QUERY PLAN "+q, args...)
		if err != nil {
			return nil, fmt.Errorf("%s: %w", name, err)
		}
		var b strings.Builder
		for rows.Next() {
			var id, parent, notused int
			var detail string
			if err := rows.Scan(&id, &parent, &notused, &detail); err != nil {
				rows.Close()
				return nil, err
			}
			b.WriteString(detail + "\n")
		}
		rows.Close()
		out[name] = b.String()
	}
	return out, nil
}
