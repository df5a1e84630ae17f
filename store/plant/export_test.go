package plant

import (
	"context"
	"fmt"

	"padline/store"
)

// QueryRowForTest runs one query for tests: dest first, then args.
func (db *DB) QueryRowForTest(ctx context.Context, q string, destAndArgs ...any) error {
	var dest, args []any
	for _, v := range destAndArgs {
		switch v.(type) {
		case *int64, *string, *float64:
			dest = append(dest, v)
		default:
			args = append(args, v)
		}
	}
	return db.pool.QueryRow(ctx, q, args...).Scan(dest...)
}

// BackendPIDsForTest returns the process ids of the server backends whose
// application_name is app (the benchmark's CPU accounting).
func (db *DB) BackendPIDsForTest(ctx context.Context, app string) ([]int64, error) {
	rows, err := db.pool.Query(ctx, `SELECT pid::bigint FROM pg_stat_activity WHERE application_name = $1`, app)
	if err != nil {
		return nil, err
	}
	var out []int64
	for rows.Next() {
		var pid int64
		if err := rows.Scan(&pid); err != nil {
			return nil, err
		}
		out = append(out, pid)
	}
	return out, rows.Err()
}

// SetSmallBatchForTest sets the most runs a batch sends as arrays
// (putSmall; -1: none) and returns the function that restores it.
func SetSmallBatchForTest(n int) (restore func()) {
	old := smallBatch
	smallBatch = n
	return func() { smallBatch = old }
}

// RunsSQLForTest returns the query Runs sends for f's runs, with its
// arguments.
func RunsSQLForTest(f store.Filter) (string, []any) {
	if fewRunsFilter(f) {
		return fewRunsSQL(f)
	}
	cond, args := where(f)
	return fmt.Sprintf(runsSQL, cond), args
}

// ExecForTest runs one statement for tests.
func (db *DB) ExecForTest(ctx context.Context, q string) error {
	_, err := db.pool.Exec(ctx, q)
	return err
}

// HoldAdvisoryLockForTest takes the session advisory lock NAME of the
// schema (as Migrate and Compact name theirs) on a connection of its own
// until release is called.
func (db *DB) HoldAdvisoryLockForTest(ctx context.Context, name string) (release func(), err error) {
	conn, err := db.pool.Acquire(ctx)
	if err != nil {
		return nil, err
	}
	if _, err := conn.Exec(ctx, `SELECT pg_advisory_lock(hashtext(current_schema() || '.' || $1))`, name); err != nil {
		conn.Release()
		return nil, err
	}
	return func() {
		conn.Exec(context.Background(), `SELECT pg_advisory_unlock(hashtext(current_schema() || '.' || $1))`, name)
		conn.Release()
	}, nil
}
