package store

import (
	"context"
	"database/sql"
	"database/sql/driver"
	"errors"
	"fmt"
	"io"
	"iter"
	"math"
	"strings"
	"time"

	"padline/sequences"
)

// Filter selects runs. Empty fields match everything. Since is inclusive and
// Until exclusive, both on the run's finish time.
type Filter struct {
	Serial  string
	Variant string
	Station string
	Fixture string
	Lot     string
	Verdict sequences.Verdict
	Since   time.Time
	Until   time.Time
	// Line selects by the station's line: only the plant store knows
	// lines; a shift log matches no run when it is set.
	Line string
	// Driver keeps only runs of stations with this driver ("sim",
	// "gpio"); "" keeps all.
	Driver string
	// Panel and Site narrow to one panel's runs and one site position
	// (1-based; 0 = any; −1 = units tested alone).
	Panel string
	Site  int
	// FirstInGroup makes Counts take a serial's first unit verdict within
	// the group the filter's station, fixture, lot and site name (its first
	// test on that station, …) instead of over the whole log, so a unit
	// counts in each group it was tested in.
	FirstInGroup bool
}

// where returns the SQL condition (on runs aliased r) and its arguments.
func (f Filter) where() (string, []any) {
	var (
		conds []string
		args  []any
	)
	add := func(cond string, arg any) {
		conds = append(conds, cond)
		args = append(args, arg)
	}
	if f.Serial != "" {
		add("r.serial = ?", f.Serial)
	}
	if f.Variant != "" {
		add("r.variant_id = (SELECT id FROM variants WHERE name = ?)", f.Variant)
	}
	if f.Station != "" {
		add("r.station_id = (SELECT id FROM stations WHERE name = ?)", f.Station)
	}
	if f.Fixture != "" {
		add("r.fixture_id = (SELECT id FROM fixtures WHERE name = ?)", f.Fixture)
	}
	if f.Lot != "" {
		add("r.lot = ?", f.Lot)
	}
	if f.Verdict != "" {
		add("r.verdict = ?", string(f.Verdict))
	}
	if f.Driver != "" {
		add("r.driver = ?", f.Driver)
	}
	if f.Panel != "" {
		add("r.panel = ?", f.Panel)
	}
	switch {
	case f.Site > 0:
		add("r.site = ?", f.Site)
	case f.Site < 0:
		conds = append(conds, "r.site IS NULL")
	}
	if !f.Since.IsZero() {
		add("r.finished >= ?", f.Since.UnixNano())
	}
	if !f.Until.IsZero() {
		add("r.finished < ?", f.Until.UnixNano())
	}
	if f.Line != "" {
		conds = append(conds, "0")
	}
	if len(conds) == 0 {
		return "1", nil
	}
	return strings.Join(conds, " AND "), args
}

// Entry is one run as the shift log holds it.
type Entry struct {
	ID int64
	sequences.Run
	// TripPF is the run's trip point (measurement trip_search/trip_pf) in
	// pF, NaN when the run has none.
	TripPF float64
}

// EntryOf is run as Runs reads it back once committed under id: the
// forwarder takes a run just committed from memory instead of reading the
// log again.
func EntryOf(id int64, run sequences.Run) *Entry {
	e := &Entry{ID: id, Run: run, TripPF: math.NaN()}
	for _, m := range run.Measurements {
		if m.Step == TripStep && m.Name == TripName && !math.IsNaN(m.Value) {
			e.TripPF = m.Value
		}
	}
	return e
}

// runsSQL streams runs with their measurements in (finished, id, seq)
// order. CROSS JOIN keeps runs as the outer loop, so SQLite walks an index
// in order and never sorts the whole result.
const runsSQL = `
SELECT r.id, r.serial, v.name, c.hash, s.name, fx.name, r.operator, r.lot, r.software,
       r.started, r.finished, r.verdict, r.fail_code, r.trip_pf, r.driver, r.fault, r.panel, r.site,
       m.seq, q.step, q.name, q.unit, m.value, m.low, m.high, m.verdict
FROM runs r
CROSS JOIN variants v ON v.id = r.variant_id
CROSS JOIN configs c ON c.id = r.config_id
CROSS JOIN stations s ON s.id = r.station_id
CROSS JOIN fixtures fx ON fx.id = r.fixture_id
LEFT JOIN measurements m ON m.run_id = r.id
LEFT JOIN quantities q ON q.id = m.quantity_id
WHERE %s
ORDER BY %s`

// Runs streams the runs matching f, oldest first (by finish time, then
// id), each with its measurements in recorded order. It reads from one
// SELECT, so the sequence is a consistent snapshot even while another
// connection writes, and it never holds more than one run in memory.
// Stop early by breaking out of the loop.
func (db *DB) Runs(ctx context.Context, f Filter) iter.Seq2[*Entry, error] {
	cond, args := f.where()
	return db.runsQuery(ctx, fmt.Sprintf(runsSQL, cond, "r.finished, r.id, m.seq"), args...)
}

// runsQuery streams the runs of q (a runsSQL), one Entry per run.
func (db *DB) runsQuery(ctx context.Context, q string, args ...any) iter.Seq2[*Entry, error] {
	return db.runsRows(func() (*sql.Rows, error) { return db.sql.QueryContext(ctx, q, args...) })
}

// runsRows streams the runs of the rows query returns (a runsSQL).
func (db *DB) runsRows(query func() (*sql.Rows, error)) iter.Seq2[*Entry, error] {
	return func(yield func(*Entry, error) bool) {
		rows, err := query()
		if err != nil {
			yield(nil, fmt.Errorf("query runs: %w", err))
			return
		}
		defer rows.Close()
		var cur *Entry
		for rows.Next() {
			var (
				r                          runCols
				seq                        sql.NullInt64
				step, name, unit, mverdict sql.NullString
				value, low, high           sql.NullFloat64
			)
			if err := rows.Scan(append(r.dest(), &seq, &step, &name, &unit, &value, &low, &high, &mverdict)...); err != nil {
				yield(nil, fmt.Errorf("read run: %w", err))
				return
			}
			if cur == nil || cur.ID != r.e.ID {
				if cur != nil && !yield(cur, nil) {
					return
				}
				cur = r.entry()
			}
			if seq.Valid {
				cur.Measurements = append(cur.Measurements, sequences.Measurement{
					Step: sequences.StepName(step.String), Name: sequences.Quantity(name.String), Unit: unit.String,
					Value: orNaN(value), Low: orNaN(low), High: orNaN(high),
					Verdict: sequences.Verdict(mverdict.String),
				})
			}
		}
		if err := rows.Err(); err != nil {
			yield(nil, fmt.Errorf("query runs: %w", err))
			return
		}
		if cur != nil {
			yield(cur, nil)
		}
	}
}

// runCols scans the run columns that runsSQL and pendingRunsSQL both
// select, in their order, into an Entry.
type runCols struct {
	e        Entry
	started  sql.NullInt64
	finished int64
	verdict  string
	trip     sql.NullFloat64
	site     sql.NullInt64
	panel    sql.NullString
}

// dest returns the scan destinations of the run columns.
func (r *runCols) dest() []any {
	e := &r.e
	return []any{&e.ID, &e.Serial, &e.Variant, &e.ConfigHash, &e.Station, &e.Fixture,
		&e.Operator, &e.Lot, &e.Software, &r.started, &r.finished, &r.verdict, &e.FailCode, &r.trip, &e.Driver, &e.Fault,
		&r.panel, &r.site}
}

// entry returns the scanned run.
func (r *runCols) entry() *Entry {
	e := r.e
	if r.started.Valid {
		e.Started = time.Unix(0, r.started.Int64).UTC()
	}
	e.Finished = time.Unix(0, r.finished).UTC()
	e.Verdict = sequences.Verdict(r.verdict)
	e.TripPF = orNaN(r.trip)
	e.Panel, e.Site = r.panel.String, int(r.site.Int64)
	return &e
}

func orNaN(v sql.NullFloat64) float64 {
	if !v.Valid {
		return math.NaN()
	}
	return v.Float64
}

// RunsBySerial returns every run of one serial, oldest first, with
// measurements.
func (db *DB) RunsBySerial(ctx context.Context, serial string) ([]*Entry, error) {
	var out []*Entry
	for e, err := range db.Runs(ctx, Filter{Serial: serial}) {
		if err != nil {
			return nil, err
		}
		out = append(out, e)
	}
	return out, nil
}

// TripPoint is one run's trip point, what drift analysis consumes.
type TripPoint struct {
	RunID    int64
	Finished time.Time
	TripPF   float64
	Station  string
	Fixture  string
	Lot      string
	Verdict  sequences.Verdict
	// Line is filled by the plant store (the station's line); the shift
	// log leaves it empty.
	Line string
	// Site is the run's panel site (1-based), 0 for a unit tested alone.
	Site int
}

// TripSeries returns the trip points of the runs matching f (usually with
// Variant set) that have one, in time order. last > 0 keeps only the last
// that many points.
func (db *DB) TripSeries(ctx context.Context, f Filter, last int) ([]TripPoint, error) {
	return db.tripSeries(ctx, f, last, true)
}

// TripValues is TripSeries with only RunID, Finished and TripPF filled: for
// long series it is faster, since the cost lies in the columns read per
// row.
func (db *DB) TripValues(ctx context.Context, f Filter, last int) ([]TripPoint, error) {
	return db.tripSeries(ctx, f, last, false)
}

// Trips streams the trip points of the runs matching f that have one,
// oldest first (by finish time, then id), from one SELECT: a consistent
// snapshot that never holds more than one point in memory. With groups
// false only RunID, Finished and TripPF are filled. The strings of a point
// are shared with the points before it where they are equal, so a long
// series allocates nothing per point. Stop early by breaking out of the
// loop.
func (db *DB) Trips(ctx context.Context, f Filter, groups bool) iter.Seq2[TripPoint, error] {
	return func(yield func(TripPoint, error) bool) {
		err := db.scanTrips(ctx, f, 0, groups, func(p TripPoint) bool { return yield(p, nil) })
		if err != nil {
			yield(TripPoint{}, err)
		}
	}
}

// tripsSQL reads a trip series from the index runs_variant_trip alone
// (migration 0006): its columns cover every column named here, and its
// order (variant, finished, id) is the order asked for, so SQLite neither
// visits the table nor sorts. With groups, the columns are packed so that
// few values cross into Go per row, where each costs time and most cost an
// allocation: the station id with the verdict's code.
// Station and fixture are named from their small tables, not joined.
func tripsSQL(cond string, desc, groups bool) string {
	order := "r.finished, r.id"
	if desc {
		order = "r.finished DESC, r.id DESC"
	}
	cols := "r.id, r.finished, r.trip_pf"
	if groups {
		cols += `, r.station_id * 4 + CASE r.verdict WHEN 'pass' THEN 0 WHEN 'fail' THEN 1 ELSE 2 END,
       r.fixture_id, r.lot, r.site`
	}
	return "SELECT " + cols + " FROM runs r WHERE " + cond + " AND r.trip_pf IS NOT NULL ORDER BY " + order
}

// verdictCodes decode the verdict packed by tripsSQL.
var verdictCodes = [...]sequences.Verdict{sequences.Pass, sequences.Fail, sequences.StationFault}

func (db *DB) tripSeries(ctx context.Context, f Filter, last int, full bool) ([]TripPoint, error) {
	var out []TripPoint
	if last > 0 {
		out = make([]TripPoint, 0, min(last, 1<<20))
	}
	err := db.scanTrips(ctx, f, last, full, func(p TripPoint) bool {
		out = append(out, p)
		return true
	})
	if err != nil {
		return nil, err
	}
	if last > 0 {
		// Read newest first to stop after last points; put them in time order.
		for i, j := 0, len(out)-1; i < j; i, j = i+1, j-1 {
			out[i], out[j] = out[j], out[i]
		}
	}
	return out, nil
}

// scanTrips calls fn with each trip point matching f, oldest first, or
// with the last points newest first when last > 0, until fn returns false.
func (db *DB) scanTrips(ctx context.Context, f Filter, last int, groups bool, fn func(TripPoint) bool) error {
	cond, args := f.where()
	var stations, fixtures map[int64]string
	if groups {
		var err error
		if stations, err = db.names(ctx, "stations"); err != nil {
			return fmt.Errorf("trip series: %w", err)
		}
		if fixtures, err = db.names(ctx, "fixtures"); err != nil {
			return fmt.Errorf("trip series: %w", err)
		}
	}
	q := tripsSQL(cond, last > 0, groups)
	if last > 0 {
		q += " LIMIT ?"
		args = append(args, last)
	}
	named := make([]driver.NamedValue, len(args))
	for i, a := range args {
		if n, ok := a.(int); ok {
			a = int64(n)
		}
		named[i] = driver.NamedValue{Ordinal: i + 1, Value: a}
	}
	conn, err := db.sql.Conn(ctx)
	if err != nil {
		return fmt.Errorf("trip series: %w", err)
	}
	defer conn.Close()
	// The rows are read from the driver itself: database/sql's Scan would
	// convert every value of every row again, by reflection.
	err = conn.Raw(func(dc any) error {
		qc, ok := dc.(driver.QueryerContext)
		if !ok {
			return fmt.Errorf("driver %T cannot query", dc)
		}
		rows, err := qc.QueryContext(ctx, q, named)
		if err != nil {
			return err
		}
		defer rows.Close()
		var p TripPoint
		dest := make([]driver.Value, 3, 7)
		if groups {
			dest = dest[:7]
		}
		for {
			if err := rows.Next(dest); err == io.EOF {
				return nil
			} else if err != nil {
				return err
			}
			p.RunID = asInt(dest[0])
			p.Finished = time.Unix(0, asInt(dest[1])).UTC()
			p.TripPF = asFloat(dest[2])
			if groups {
				if lot, _ := dest[5].(string); lot != p.Lot {
					p.Lot = lot
				}
				sv := asInt(dest[3])
				sid, fid := sv>>2, asInt(dest[4])
				st, ok := stations[sid]
				if !ok {
					if st, err = db.name(ctx, "stations", sid); err != nil {
						return err
					}
					stations[sid] = st
				}
				fx, ok := fixtures[fid]
				if !ok {
					if fx, err = db.name(ctx, "fixtures", fid); err != nil {
						return err
					}
					fixtures[fid] = fx
				}
				p.Station, p.Fixture, p.Verdict = st, fx, verdictCodes[sv&3]
				p.Site = int(asInt(dest[6])) // NULL (nil) for a unit tested alone: 0
			}
			if !fn(p) {
				return nil
			}
		}
	})
	if err != nil {
		return fmt.Errorf("trip series: %w", err)
	}
	return nil
}

// asInt and asFloat read a driver value of an INTEGER or REAL column.
func asInt(v driver.Value) int64 {
	switch x := v.(type) {
	case int64:
		return x
	case float64:
		return int64(x)
	}
	return 0
}

func asFloat(v driver.Value) float64 {
	switch x := v.(type) {
	case float64:
		return x
	case int64:
		return float64(x)
	}
	return math.NaN()
}

// name reads one name of a small (id, name) table: one committed after
// names read the table.
func (db *DB) name(ctx context.Context, table string, id int64) (string, error) {
	var n string
	err := db.sql.QueryRowContext(ctx, "SELECT name FROM "+table+" WHERE id = ?", id).Scan(&n)
	return n, err
}

// names reads a small (id, name) table whole.
func (db *DB) names(ctx context.Context, table string) (map[int64]string, error) {
	rows, err := db.sql.QueryContext(ctx, "SELECT id, name FROM "+table)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	m := map[int64]string{}
	for rows.Next() {
		var (
			id   int64
			name string
		)
		if err := rows.Scan(&id, &name); err != nil {
			return nil, err
		}
		m[id] = name
	}
	return m, rows.Err()
}

// Counts are the verdict totals of a set of runs, for yield.
type Counts struct {
	Runs         int64
	Pass         int64
	Fail         int64
	StationFault int64
	// FirstUnits counts serials whose first unit verdict (their first run
	// that is not a station fault, over the whole log or, with
	// Filter.FirstInGroup, within the group) is among the runs;
	// FirstPass counts those of them that passed it. First-pass yield is
	// FirstPass/FirstUnits.
	FirstUnits int64
	FirstPass  int64
}

// sameGroup is the condition that run e lies in r's group under
// FirstInGroup ("" otherwise).
func (f Filter) sameGroup() string {
	if !f.FirstInGroup {
		return ""
	}
	var c string
	if f.Station != "" {
		c += " AND e.station_id = r.station_id"
	}
	if f.Fixture != "" {
		c += " AND e.fixture_id = r.fixture_id"
	}
	if f.Lot != "" {
		c += " AND e.lot = r.lot"
	}
	if f.Site != 0 {
		c += " AND e.site = r.site"
	}
	return c
}

// Counts returns the verdict totals of the runs matching f.
func (db *DB) Counts(ctx context.Context, f Filter) (Counts, error) {
	cond, args := f.where()
	var (
		c                        Counts
		pass, fail, sf, fu, fpas float64
	)
	if err := db.sql.QueryRowContext(ctx, countsSQL(cond, f.sameGroup()), args...).Scan(&c.Runs, &pass, &fail, &sf, &fu, &fpas); err != nil {
		return Counts{}, fmt.Errorf("counts: %w", err)
	}
	c.Pass, c.Fail, c.StationFault = int64(pass), int64(fail), int64(sf)
	c.FirstUnits, c.FirstPass = int64(fu), int64(fpas)
	return c, nil
}

// countsSQL counts verdicts and first unit verdicts. A run is its serial's
// first unit verdict when no run of the serial that is not a station fault
// comes before it in (finished, id) order: one probe of the index
// runs_serial_verdict per run, which covers the probe. LIMIT -1 keeps the
// inner SELECT a co-routine (SQLite's query flattener leaves a subquery
// with a LIMIT under an aggregate alone), so that probe runs once per run;
// flattened, it would run once for each of the two sums that read it.
func countsSQL(cond, sameGroup string) string {
	return `SELECT count(*), total(verdict = 'pass'), total(verdict = 'fail'),
       total(verdict = 'station-fault'), total(first), total(first AND verdict = 'pass')
FROM (
  SELECT r.verdict,
         r.verdict != 'station-fault' AND NOT EXISTS (
           SELECT 1 FROM runs e
           WHERE e.serial = r.serial AND (e.finished, e.id) < (r.finished, r.id)
             AND e.verdict != 'station-fault'` + sameGroup + `
         ) AS first
  FROM runs r WHERE ` + cond + `
  LIMIT -1
)`
}

// ConfigChange is one configuration a variant has had.
type ConfigChange struct {
	Hash      string
	FirstSeen time.Time // when PutVariant first registered these bytes
	Size      int       // snapshot length in bytes
}

// ConfigHistory returns the configurations variant has had, in the order
// they were first seen: each entry is a change of the variant's limits or
// other settings.
func (db *DB) ConfigHistory(ctx context.Context, variant string) ([]ConfigChange, error) {
	rows, err := db.sql.QueryContext(ctx,
		`SELECT c.hash, c.first_seen, length(c.snapshot) FROM configs c
		 JOIN variants v ON v.id = c.variant_id WHERE v.name = ?
		 ORDER BY c.first_seen, c.id`, variant)
	if err != nil {
		return nil, fmt.Errorf("config history of %s: %w", variant, err)
	}
	defer rows.Close()
	var out []ConfigChange
	for rows.Next() {
		var (
			c    ConfigChange
			seen int64
		)
		if err := rows.Scan(&c.Hash, &seen, &c.Size); err != nil {
			return nil, fmt.Errorf("config history of %s: %w", variant, err)
		}
		c.FirstSeen = time.Unix(0, seen).UTC()
		out = append(out, c)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("config history of %s: %w", variant, err)
	}
	return out, nil
}

// Snapshot returns the exact configuration bytes registered for variant
// under hash; ErrNotFound if there are none.
func (db *DB) Snapshot(ctx context.Context, variant, hash string) ([]byte, error) {
	var b []byte
	err := db.sql.QueryRowContext(ctx,
		`SELECT c.snapshot FROM configs c JOIN variants v ON v.id = c.variant_id
		 WHERE v.name = ? AND c.hash = ?`, variant, hash).Scan(&b)
	if errors.Is(err, sql.ErrNoRows) {
		return nil, fmt.Errorf("snapshot of %s %s: %w", variant, hash, ErrNotFound)
	}
	if err != nil {
		return nil, fmt.Errorf("snapshot of %s %s: %w", variant, hash, err)
	}
	if b == nil {
		b = []byte{}
	}
	return b, nil
}

// PriorRuns counts the unit verdicts already logged for a serial (pass and
// fail; a station fault tested nothing) and how many of them were fails:
// what a retest policy needs before the unit is tested again.
func (db *DB) PriorRuns(ctx context.Context, serial string) (tested, failed int, err error) {
	err = db.sql.QueryRowContext(ctx, `
		SELECT count(*), coalesce(sum(verdict = 'fail'), 0)
		FROM runs WHERE serial = ? AND verdict IN ('pass', 'fail')`, serial).Scan(&tested, &failed)
	if err != nil {
		return 0, 0, fmt.Errorf("prior runs of %s: %w", serial, err)
	}
	return tested, failed, nil
}

// Drivers lists the station drivers the log's runs were recorded with, in
// name order ("" for runs from before drivers were recorded).
func (db *DB) Drivers(ctx context.Context) ([]string, error) {
	// Each value is found by one seek of the index runs_driver (the next
	// driver after the last one found), not by reading every entry as
	// DISTINCT would: a handful of seeks on a million-run log.
	rows, err := db.sql.QueryContext(ctx, `
WITH RECURSIVE d(driver) AS (
  SELECT min(driver) FROM runs
  UNION ALL
  SELECT (SELECT min(driver) FROM runs WHERE driver > d.driver) FROM d WHERE d.driver IS NOT NULL
)
SELECT driver FROM d WHERE driver IS NOT NULL`)
	if err != nil {
		return nil, fmt.Errorf("query drivers: %w", err)
	}
	defer rows.Close()
	var out []string
	for rows.Next() {
		var d string
		if err := rows.Scan(&d); err != nil {
			return nil, fmt.Errorf("query drivers: %w", err)
		}
		out = append(out, d)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("query drivers: %w", err)
	}
	return out, nil
}

// RecentValues returns the values (newest first, at most n) of the
// measurement step/name on the passing runs of variant at station, looking
// at no more than the 4·n runs of the variant at the station logged last:
// a prior for the next unit from the units just before it (the trip
// search's σ), cheap on a log of any length.
func (db *DB) RecentValues(ctx context.Context, variant, station, step, name string, n int) ([]float64, error) {
	if n <= 0 {
		return nil, nil
	}
	rows, err := db.sql.QueryContext(ctx, `
		SELECT m.value FROM (
		  SELECT r.id, r.finished, r.verdict FROM runs r
		  WHERE r.variant_id = (SELECT id FROM variants WHERE name = ?)
		    AND r.station_id = (SELECT id FROM stations WHERE name = ?)
		  ORDER BY r.finished DESC LIMIT ?) r
		JOIN measurements m ON m.run_id = r.id
		JOIN quantities q ON q.id = m.quantity_id
		WHERE r.verdict = 'pass' AND q.step = ? AND q.name = ? AND m.value IS NOT NULL
		ORDER BY r.finished DESC LIMIT ?`, variant, station, 4*n, step, name, n)
	if err != nil {
		return nil, fmt.Errorf("recent %s/%s of %s at %s: %w", step, name, variant, station, err)
	}
	defer rows.Close()
	var out []float64
	for rows.Next() {
		var v float64
		if err := rows.Scan(&v); err != nil {
			return nil, fmt.Errorf("recent %s/%s of %s at %s: %w", step, name, variant, station, err)
		}
		out = append(out, v)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("recent %s/%s of %s at %s: %w", step, name, variant, station, err)
	}
	return out, nil
}
