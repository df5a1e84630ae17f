package plant

import (
	"context"
	"errors"
	"fmt"
	"sort"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"
)

// Rebuilt is one closed month's partition that Compact looked at.
type Rebuilt struct {
	Table string `json:"table"` // runs_y2026m11, measurements_y2026m11
	Month string `json:"month"` // 2026-11 (UTC, by the station's finish time)
	Rows  int64  `json:"rows"`
	// IndexBytesBefore and IndexBytesAfter are the size of the
	// partition's indexes before and after (equal when kept).
	IndexBytesBefore int64   `json:"index_bytes_before"`
	IndexBytesAfter  int64   `json:"index_bytes_after"`
	Seconds          float64 `json:"seconds"`
	// Kept says it was not rebuilt: it was rebuilt after its month
	// closed, with RowsThen rows, and has gained under a tenth since.
	Kept     bool  `json:"kept"`
	RowsThen int64 `json:"rows_at_last_rebuild,omitempty"`
	// Dropped names the invalid indexes an interrupted rebuild had left,
	// dropped before this one.
	Dropped []string `json:"dropped_invalid_indexes,omitempty"`
}

// compactMarker begins the comment Compact puts on a partition it rebuilt;
// the row count that follows decides whether it needs rebuilding again.
const compactMarker = "padline plant compact: rebuilt with "

// compactRegrowth is the share of rows a closed partition must gain (runs
// of a station that was offline when the month closed) before Compact
// rebuilds it again.
const compactRegrowth = 0.10

// Compact rebuilds the indexes of every closed month's partition of runs
// and measurements (REINDEX TABLE CONCURRENTLY: stations go on forwarding
// and readers reading) that it has not rebuilt since the month closed, or
// that has gained a tenth more rows since. Runs of every station and
// variant arrive interleaved, so while a month is open its indexes end
// half full and scattered over the disk; that costs nothing while they are
// in the server's memory, but a first query after a restart reads them
// from disk (README "The plant store"). each, if not nil, is called as each
// partition is done. Run it as the plant's owner. An interrupted rebuild
// (Ctrl-C, a lost connection) leaves an invalid index behind, which the
// next Compact drops first.
func (db *DB) Compact(ctx context.Context, now time.Time, each func(Rebuilt)) ([]Rebuilt, error) {
	if v, err := db.Version(ctx); err != nil {
		return nil, fmt.Errorf("compact: %w", err)
	} else if v == 0 {
		return nil, errors.New("compact: no plant schema here (run 'padline plant init --db URL')")
	}
	conn, err := db.pool.Acquire(ctx)
	if err != nil {
		return nil, fmt.Errorf("compact: %w", err)
	}
	defer conn.Release()
	var locked bool
	if err := conn.QueryRow(ctx, `SELECT pg_try_advisory_lock(hashtext(current_schema() || '.plant_compact'))`).Scan(&locked); err != nil {
		return nil, fmt.Errorf("compact: %w", err)
	}
	if !locked {
		return nil, errors.New("compact: another 'padline plant compact' is running on this schema; let it finish")
	}
	defer conn.Exec(context.WithoutCancel(ctx), `SELECT pg_advisory_unlock(hashtext(current_schema() || '.plant_compact'))`)
	var owner, me string
	var owns bool
	if err := conn.QueryRow(ctx, `SELECT r.rolname, current_user, pg_has_role(current_user, r.oid, 'USAGE')
		FROM pg_class c JOIN pg_roles r ON r.oid = c.relowner WHERE c.oid = to_regclass(current_schema() || '.runs')`).Scan(&owner, &me, &owns); err != nil {
		return nil, fmt.Errorf("compact: %w", err)
	}
	if !owns {
		return nil, fmt.Errorf("compact: rebuilding indexes takes the plant's owner: connect as %s, not %s", owner, me)
	}
	parts, err := closedPartitions(ctx, conn, now)
	if err != nil {
		return nil, fmt.Errorf("compact: %w", err)
	}
	var out []Rebuilt
	for _, p := range parts {
		r, err := compactOne(ctx, conn, p)
		if err != nil && ctx.Err() != nil {
			return out, fmt.Errorf("compact stopped at %s with %d partitions done: run it again to go on (it first drops the invalid index a stopped rebuild leaves): %w", p.table, len(out), ctx.Err())
		}
		if err != nil {
			return out, fmt.Errorf("compact %s: %w", p.table, err)
		}
		out = append(out, r)
		if each != nil {
			each(r)
		}
	}
	return out, nil
}

// partition is one month partition of runs or measurements.
type partition struct {
	schema, table, comment string
	month                  time.Time
}

// closedPartitions lists the partitions of runs and measurements whose
// month (UTC) ended at or before now, by month, runs first.
func closedPartitions(ctx context.Context, conn *pgxpool.Conn, now time.Time) ([]partition, error) {
	rows, err := conn.Query(ctx, `SELECT n.nspname, c.relname, coalesce(obj_description(c.oid, 'pg_class'), '')
		FROM pg_inherits i JOIN pg_class c ON c.oid = i.inhrelid JOIN pg_class p ON p.oid = i.inhparent
		JOIN pg_namespace n ON n.oid = p.relnamespace
		WHERE n.nspname = current_schema() AND p.relname IN ('runs', 'measurements')`)
	if err != nil {
		return nil, err
	}
	var out []partition
	for rows.Next() {
		var p partition
		if err := rows.Scan(&p.schema, &p.table, &p.comment); err != nil {
			return nil, err
		}
		// plant_ensure_month names them TABLE_yYYYYmMM (migration 0001).
		i := strings.LastIndex(p.table, "_y")
		if i < 0 {
			continue
		}
		m, err := time.Parse("2006m01", p.table[i+2:])
		if err != nil || m.AddDate(0, 1, 0).After(now) {
			continue
		}
		p.month = m
		out = append(out, p)
	}
	if err := rows.Err(); err != nil {
		return nil, err
	}
	sort.Slice(out, func(i, j int) bool {
		a, b := out[i], out[j]
		if !a.month.Equal(b.month) {
			return a.month.Before(b.month)
		}
		return strings.HasPrefix(a.table, "runs_") && !strings.HasPrefix(b.table, "runs_")
	})
	return out, nil
}

// compactOne rebuilds one partition unless its comment says it was
// rebuilt with nearly as many rows as it has now.
func compactOne(ctx context.Context, conn *pgxpool.Conn, p partition) (Rebuilt, error) {
	name := pgx.Identifier{p.schema, p.table}.Sanitize()
	r := Rebuilt{Table: p.table, Month: p.month.Format("2006-01")}
	if err := conn.QueryRow(ctx, `SELECT count(*) FROM `+name).Scan(&r.Rows); err != nil {
		return r, err
	}
	indexBytes := func() (int64, error) {
		var n int64
		err := conn.QueryRow(ctx, `SELECT coalesce(sum(pg_relation_size(indexrelid)), 0)::bigint FROM pg_index
			WHERE indrelid = $1::regclass`, name).Scan(&n)
		return n, err
	}
	// REINDEX … CONCURRENTLY names its new copy of an index NAME_ccnew
	// (and the old one NAME_ccold while it swaps them); one interrupted
	// leaves it invalid, and the manual's way out is to drop it and
	// rebuild (PostgreSQL manual, REINDEX, "Rebuilding Indexes
	// Concurrently").
	rows, err := conn.Query(ctx, `SELECT ci.relname FROM pg_index x JOIN pg_class ci ON ci.oid = x.indexrelid
		WHERE x.indrelid = $1::regclass AND NOT x.indisvalid AND ci.relname ~ '_cc(new|old)[0-9]*$'`, name)
	if err != nil {
		return r, err
	}
	r.Dropped, err = pgx.CollectRows(rows, pgx.RowTo[string])
	if err != nil {
		return r, err
	}
	for _, ix := range r.Dropped {
		if _, err := conn.Exec(ctx, `DROP INDEX CONCURRENTLY IF EXISTS `+pgx.Identifier{p.schema, ix}.Sanitize()); err != nil {
			return r, fmt.Errorf("drop the invalid index %s an interrupted rebuild left: %w", ix, err)
		}
	}
	if r.IndexBytesBefore, err = indexBytes(); err != nil {
		return r, err
	}
	r.IndexBytesAfter = r.IndexBytesBefore
	if rest, ok := strings.CutPrefix(p.comment, compactMarker); ok {
		if _, err := fmt.Sscanf(rest, "%d rows", &r.RowsThen); err == nil &&
			float64(r.Rows) < float64(r.RowsThen)*(1+compactRegrowth) {
			r.Kept = true
			return r, nil
		}
	}
	if r.Rows == 0 {
		r.Kept = true
		return r, nil
	}
	start := time.Now()
	if _, err := conn.Exec(ctx, `REINDEX TABLE CONCURRENTLY `+name); err != nil {
		return r, fmt.Errorf("%w (an interrupted rebuild leaves an invalid index; the next 'padline plant compact' drops it)", err)
	}
	marker := fmt.Sprintf("%s%d rows at %s", compactMarker, r.Rows, time.Now().UTC().Format(time.RFC3339))
	if _, err := conn.Exec(ctx, `COMMENT ON TABLE `+name+` IS '`+strings.ReplaceAll(marker, "'", "''")+`'`); err != nil {
		return r, err
	}
	r.Seconds = time.Since(start).Seconds()
	r.IndexBytesAfter, err = indexBytes()
	return r, err
}

// RebuiltHeader heads the text table of Rebuilt.Line.
const RebuiltHeader = "MONTH    TABLE                              ROWS  INDEX MB  REBUILT MB  SECONDS\n"

// Line is r as one line of the text table under RebuiltHeader.
func (r Rebuilt) Line() string {
	mb := func(b int64) float64 { return float64(b) / 1e6 }
	head := fmt.Sprintf("%-8s %-28s %11d %9.1f", r.Month, r.Table, r.Rows, mb(r.IndexBytesBefore))
	if r.Kept {
		if r.RowsThen == 0 {
			return head + "  kept: empty\n"
		}
		return fmt.Sprintf("%s  kept: rebuilt with %d rows\n", head, r.RowsThen)
	}
	dropped := ""
	if len(r.Dropped) > 0 {
		dropped = "  (first dropped an interrupted rebuild's " + strings.Join(r.Dropped, ", ") + ")"
	}
	return fmt.Sprintf("%s %11.1f %8.1f%s\n", head, mb(r.IndexBytesAfter), r.Seconds, dropped)
}

// CompactSummary is the last line of a Compact that looked at done in took.
func CompactSummary(done []Rebuilt, took time.Duration) string {
	var rebuilt int
	var before, after int64
	for _, r := range done {
		if !r.Kept {
			rebuilt++
			before, after = before+r.IndexBytesBefore, after+r.IndexBytesAfter
		}
	}
	parts := func(n int) string {
		if n == 1 {
			return "1 partition"
		}
		return fmt.Sprintf("%d partitions", n)
	}
	switch {
	case len(done) == 0:
		return "no month has closed yet: nothing to rebuild"
	case rebuilt == 0:
		return fmt.Sprintf("nothing to rebuild: %s kept, in %.1f s", parts(len(done)), took.Seconds())
	}
	return fmt.Sprintf("%s rebuilt (indexes %.1f MB -> %.1f MB), %d kept, in %.1f s",
		parts(rebuilt), float64(before)/1e6, float64(after)/1e6, len(done)-rebuilt, took.Seconds())
}
