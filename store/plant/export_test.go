package plant

import "context"

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
