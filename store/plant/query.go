package plant

import (
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"iter"
	"math"
	"strconv"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"

	"padline/sequences"
	"padline/store"
)

// The read side mirrors store.DB's queries (same filters, types and
// order), so history and drift give on the plant store the numbers a
// station's shift log gives for that station's runs. Times filter and
// order by at (the station's finish time corrected by its clock offset);
// a run's id is its id in its station's shift log.

// where returns the SQL condition on runs r, with arguments from $1.
func where(f store.Filter) (string, []any) {
	var (
		conds []string
		args  []any
	)
	add := func(cond string, arg any) {
		args = append(args, arg)
		conds = append(conds, strings.ReplaceAll(cond, "?", "$"+strconv.Itoa(len(args))))
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
	if f.Line != "" {
		add("r.station_id IN (SELECT id FROM stations WHERE line = ?)", f.Line)
	}
	if f.Fixture != "" {
		add("r.fixture_id = (SELECT id FROM fixtures WHERE name = ?)", f.Fixture)
	}
	if f.Lot != "" {
		add("r.lot = ?", f.Lot)
	}
	// The plant keeps a run's panel label and site (as text) where the
	// shift log keeps NULL, '' for a unit tested alone (migration 0011).
	// The redundant r.panel <> '' is the predicate of the partial index
	// runs_panel (migration 0012) written out: a prepared statement planned
	// generically (pgx prepares each query; PostgreSQL plans generically
	// after five executions) cannot prove it from r.panel = $n, and a
	// partial index is used only where the query implies its predicate
	// (PostgreSQL manual, "Partial Indexes": "parameterized query clauses
	// do not work with a partial index"). TestPanelIndexServesPanelRuns.
	if f.Panel != "" {
		add("r.panel = ? AND r.panel <> ''", f.Panel)
	}
	switch {
	case f.Site > 0:
		add("r.site = ?", strconv.Itoa(f.Site))
	case f.Site < 0:
		conds = append(conds, "r.site = ''")
	}
	if f.Verdict != "" {
		add("r.verdict = ?", string(f.Verdict))
	}
	if f.Driver != "" {
		add("r.driver = ?", f.Driver)
	}
	if !f.Since.IsZero() {
		add("r.at >= ?", f.Since.UnixNano())
	}
	if !f.Until.IsZero() {
		add("r.at < ?", f.Until.UnixNano())
	}
	if len(conds) == 0 {
		return "true", nil
	}
	return strings.Join(conds, " AND "), args
}

const runsSQL = `
SELECT r.log_id, r.local_id, r.serial, v.name, c.hash, s.name, fx.name, r.operator, r.lot, r.software,
       r.started, r.finished, r.verdict, r.fail_code, r.trip_pf, r.driver, r.fault, r.panel, r.site,
       m.seq, q.step, q.name, q.unit, m.value, m.low, m.high, m.verdict
FROM runs r
JOIN variants v ON v.id = r.variant_id
JOIN configs c ON c.id = r.config_id
JOIN stations s ON s.id = r.station_id
JOIN fixtures fx ON fx.id = r.fixture_id
LEFT JOIN measurements m ON m.log_id = r.log_id AND m.local_id = r.local_id AND m.finished = r.finished
LEFT JOIN quantities q ON q.id = m.quantity_id
WHERE %s
ORDER BY r.at, r.log_id, r.local_id, m.seq`

// siteNumber is a run's panel site as the shift log gives it (1-based; 0
// for a unit tested alone, whose site the plant keeps as empty text).
func siteNumber(s string) int {
	n, _ := strconv.Atoi(s)
	return n
}

func orNaN(v *float64) float64 {
	if v == nil {
		return math.NaN()
	}
	return *v
}

// Runs streams the runs matching f, oldest first, each with its
// measurements in recorded order; Entry.ID is the run's id in its
// station's shift log.
func (db *DB) Runs(ctx context.Context, f store.Filter) iter.Seq2[*store.Entry, error] {
	if fewRunsFilter(f) {
		return db.fewRuns(ctx, f)
	}
	return func(yield func(*store.Entry, error) bool) {
		cond, args := where(f)
		rows, err := db.pool.Query(ctx, fmt.Sprintf(runsSQL, cond), args...)
		if err != nil {
			yield(nil, fmt.Errorf("query plant runs: %w", err))
			return
		}
		defer rows.Close()
		var (
			cur     *store.Entry
			curLog  int32
			site    string
			logID   int32
			e       store.Entry
			started *int64
			fin     int64
			verdict string
			trip    *float64
			seq     *int32
			step    *string
			name    *string
			unit    *string
			mv      *string
			val     *float64
			low     *float64
			high    *float64
		)
		for rows.Next() {
			e = store.Entry{}
			if err := rows.Scan(&logID, &e.ID, &e.Serial, &e.Variant, &e.ConfigHash, &e.Station, &e.Fixture,
				&e.Operator, &e.Lot, &e.Software, &started, &fin, &verdict, &e.FailCode, &trip, &e.Driver, &e.Fault, &e.Panel, &site,
				&seq, &step, &name, &unit, &val, &low, &high, &mv); err != nil {
				yield(nil, fmt.Errorf("read plant run: %w", err))
				return
			}
			if cur == nil || cur.ID != e.ID || curLog != logID {
				if cur != nil && !yield(cur, nil) {
					return
				}
				ne := e
				if started != nil {
					ne.Started = time.Unix(0, *started).UTC()
				}
				ne.Finished = time.Unix(0, fin).UTC()
				ne.Verdict = sequences.Verdict(verdict)
				ne.TripPF = orNaN(trip)
				ne.Site = siteNumber(site)
				cur, curLog = &ne, logID
			}
			if seq != nil {
				cur.Measurements = append(cur.Measurements, sequences.Measurement{
					Step: sequences.StepName(*step), Name: sequences.Quantity(*name), Unit: *unit,
					Value: orNaN(val), Low: orNaN(low), High: orNaN(high),
					Verdict: sequences.Verdict(*mv),
				})
			}
		}
		if err := rows.Err(); err != nil {
			yield(nil, fmt.Errorf("query plant runs: %w", err))
			return
		}
		if cur != nil {
			yield(cur, nil)
		}
	}
}

// RunsBySerial returns every run of one serial across the plant, oldest
// first, with measurements.
func (db *DB) RunsBySerial(ctx context.Context, serial string) ([]*store.Entry, error) {
	var out []*store.Entry
	for e, err := range db.Runs(ctx, store.Filter{Serial: serial}) {
		if err != nil {
			return nil, err
		}
		out = append(out, e)
	}
	return out, nil
}

// TripSeries returns the trip points of the runs matching f in time order
// (last > 0: only the last that many), with station, fixture, lot,
// verdict, line and site.
func (db *DB) TripSeries(ctx context.Context, f store.Filter, last int) ([]store.TripPoint, error) {
	return db.tripSeries(ctx, f, last, true)
}

// TripValues is TripSeries with only RunID, Finished and TripPF filled.
func (db *DB) TripValues(ctx context.Context, f store.Filter, last int) ([]store.TripPoint, error) {
	return db.tripSeries(ctx, f, last, false)
}

func (db *DB) tripSeries(ctx context.Context, f store.Filter, last int, full bool) ([]store.TripPoint, error) {
	var out []store.TripPoint
	if last > 0 {
		out = make([]store.TripPoint, 0, min(last, 1<<20))
	}
	err := db.scanTrips(ctx, f, last, full, func(p store.TripPoint) bool {
		out = append(out, p)
		return true
	})
	if err != nil {
		return nil, err
	}
	if last == 0 {
		return out, nil
	}
	// With last, the points were read newest first: put them in time order.
	for i, j := 0, len(out)-1; i < j; i, j = i+1, j-1 {
		out[i], out[j] = out[j], out[i]
	}
	return out, nil
}

// scanTrips calls fn with each trip point matching f, oldest first, or
// with the last points newest first when last > 0, until fn returns false.
// A long series streams: nothing is kept per point, the strings of a point
// are shared with the points before it where they are equal, and the
// numbers are decoded from PostgreSQL's binary format as they arrive
// (rows.Scan costs several times more per value; it stays the way when
// the connection asks for text results, e.g. the simple protocol).
func (db *DB) scanTrips(ctx context.Context, f store.Filter, last int, groups bool, fn func(store.TripPoint) bool) error {
	cond, args := where(f)
	var stations, fixtures, lines map[int32]string
	if groups {
		var err error
		if stations, err = db.names(ctx, "stations", "name"); err != nil {
			return fmt.Errorf("plant trip series: %w", err)
		}
		if fixtures, err = db.names(ctx, "fixtures", "name"); err != nil {
			return fmt.Errorf("plant trip series: %w", err)
		}
		if lines, err = db.names(ctx, "stations", "line"); err != nil {
			return fmt.Errorf("plant trip series: %w", err)
		}
	}
	cols := "r.local_id, r.at, r.trip_pf"
	if groups {
		cols += ", r.station_id, r.fixture_id, r.lot, r.verdict, r.site"
	}
	order := "r.at, r.log_id, r.local_id"
	if last > 0 {
		order = "r.at DESC, r.log_id DESC, r.local_id DESC"
	}
	q := `SELECT ` + cols + ` FROM runs r WHERE ` + cond + ` AND r.trip_pf IS NOT NULL ORDER BY ` + order
	if last > 0 {
		args = append(args, last)
		q += " LIMIT $" + strconv.Itoa(len(args))
	}
	rows, err := db.pool.Query(ctx, q, args...)
	if err != nil {
		return fmt.Errorf("plant trip series: %w", err)
	}
	defer rows.Close()
	fast := true
	for i, fd := range rows.FieldDescriptions() {
		// The numbers must come in binary (pgx asks for it on a prepared
		// statement); the text columns read the same in either format.
		if i < 5 && fd.Format != pgx.BinaryFormatCode {
			fast = false
		}
	}
	var (
		p                store.TripPoint
		sid, fid         int32 = -1, -1
		lot, verdict, st string
		id, at           int64
		trip             float64
		sidN, fidN       int32
		lb, vb, sb       []byte
		sl, sv, ss       string
		slow             []any
	)
	if !fast {
		slow = []any{&id, &at, &trip}
		if groups {
			slow = append(slow, &sidN, &fidN, &sl, &sv, &ss)
		}
	}
	for rows.Next() {
		if fast {
			v := rows.RawValues()
			ok := len(v[0]) == 8 && len(v[1]) == 8 && len(v[2]) == 8 && (!groups || len(v[3]) == 4 && len(v[4]) == 4)
			if !ok {
				return fmt.Errorf("plant trip series: a row of %d columns that is not (bigint, bigint, float8[, int, int, text…])", len(v))
			}
			id, at = int64(binary.BigEndian.Uint64(v[0])), int64(binary.BigEndian.Uint64(v[1]))
			trip = math.Float64frombits(binary.BigEndian.Uint64(v[2]))
			if groups {
				sidN, fidN = int32(binary.BigEndian.Uint32(v[3])), int32(binary.BigEndian.Uint32(v[4]))
				lb, vb, sb = v[5], v[6], v[7]
			}
		} else {
			if err := rows.Scan(slow...); err != nil {
				return fmt.Errorf("plant trip series: %w", err)
			}
			lb, vb, sb = []byte(sl), []byte(sv), []byte(ss)
		}
		p.RunID, p.Finished, p.TripPF = id, time.Unix(0, at).UTC(), trip
		if groups {
			if sidN != sid {
				sid, p.Station, p.Line = sidN, stations[sidN], lines[sidN]
			}
			if fidN != fid {
				fid, p.Fixture = fidN, fixtures[fidN]
			}
			// string(b) in a comparison does not allocate.
			if string(lb) != lot {
				lot = string(lb)
				p.Lot = lot
			}
			if string(vb) != verdict {
				verdict = string(vb)
				p.Verdict = sequences.Verdict(verdict)
			}
			if string(sb) != st {
				st = string(sb)
				p.Site, _ = strconv.Atoi(st)
			}
		}
		if !fn(p) {
			return nil
		}
	}
	if err := rows.Err(); err != nil {
		return fmt.Errorf("plant trip series: %w", err)
	}
	return nil
}

// names reads one column of a small (id, …) table whole.
func (db *DB) names(ctx context.Context, table, col string) (map[int32]string, error) {
	rows, err := db.pool.Query(ctx, "SELECT id, "+col+" FROM "+table)
	if err != nil {
		return nil, err
	}
	m := map[int32]string{}
	var id int32
	var n string
	_, err = pgx.ForEachRow(rows, []any{&id, &n}, func() error { m[id] = n; return nil })
	return m, err
}

// groupNames names the ids a --by group is kept under: stations by name or
// by line, fixtures by name; nil for groups stored as text (lot).
func (db *DB) groupNames(ctx context.Context, by string) (map[int32]string, error) {
	switch by {
	case "station":
		return db.names(ctx, "stations", "name")
	case "line":
		return db.names(ctx, "stations", "line")
	case "fixture":
		return db.names(ctx, "fixtures", "name")
	}
	return nil, nil
}

// Counts returns the verdict totals of the runs matching f, and the
// first-pass counts by the plant's first-verdict rule (firstTable).
func (db *DB) Counts(ctx context.Context, f store.Filter) (store.Counts, error) {
	cond, args := where(f)
	q := `SELECT a.*, b.* FROM
  (SELECT count(*), count(*) FILTER (WHERE r.verdict = 'pass'), count(*) FILTER (WHERE r.verdict = 'fail'),
          count(*) FILTER (WHERE r.verdict = 'station-fault') FROM runs r WHERE ` + cond + `) a,
  (SELECT count(*), count(*) FILTER (WHERE r.verdict = 'pass') FROM ` + firstFrom(firstTable(f, "")) + ` WHERE ` + cond + `) b`
	var c store.Counts
	if err := db.pool.QueryRow(ctx, q, args...).Scan(&c.Runs, &c.Pass, &c.Fail, &c.StationFault, &c.FirstUnits, &c.FirstPass); err != nil {
		return store.Counts{}, fmt.Errorf("plant counts: %w", err)
	}
	return c, nil
}

// firstTable is the table of first unit verdicts that first-pass yield is
// counted from (DEVELOPERS.md "Plant-wide first-pass yield"). A station's
// shift log counts a serial's first verdict in that log; on the plant a
// serial may have been tested on several stations. When the filter names
// a station or the groups are stations (drift --station-id or --by
// station, the line board), the plant takes the serial's first verdict on
// that station, serial_station_first, so each station's numbers are its
// log's. Otherwise it takes the serial's first verdict anywhere in the
// plant, serial_first: a unit failed on one station and retested on
// another is one unit, counted once, by its first verdict, in the group
// (fixture, lot, site, line) of its first test.
func firstTable(f store.Filter, by string) string {
	if f.Station != "" || by == "station" {
		return "serial_station_first"
	}
	return "serial_first"
}

// firstFrom reads a table of first unit verdicts as runs r, so the runs'
// filter applies to it. The table keeps no driver and no panel label: a
// driver or panel filter reads the run's own (one probe of runs_serial per
// first verdict, made only when the filter names a driver or a panel, as
// PostgreSQL evaluates each subquery only where r.driver or r.panel is
// used).
func firstFrom(table string) string {
	run := `FROM runs x WHERE x.serial = t.serial AND x.at = t.at AND x.log_id = t.log_id AND x.local_id = t.local_id LIMIT 1`
	return `(SELECT t.*, (SELECT x.driver ` + run + `) AS driver, (SELECT x.panel ` + run + `) AS panel FROM ` + table + ` t) r`
}

// ConfigHistory returns the configurations variant has had, in the order
// the plant first saw them.
func (db *DB) ConfigHistory(ctx context.Context, variant string) ([]store.ConfigChange, error) {
	rows, err := db.pool.Query(ctx, `SELECT c.hash, c.first_seen, length(c.snapshot) FROM configs c
		JOIN variants v ON v.id = c.variant_id WHERE v.name = $1 ORDER BY c.first_seen, c.id`, variant)
	if err != nil {
		return nil, fmt.Errorf("plant config history of %s: %w", variant, err)
	}
	var (
		out  []store.ConfigChange
		c    store.ConfigChange
		seen int64
		size int32
	)
	_, err = pgx.ForEachRow(rows, []any{&c.Hash, &seen, &size}, func() error {
		c.FirstSeen, c.Size = time.Unix(0, seen).UTC(), int(size)
		out = append(out, c)
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("plant config history of %s: %w", variant, err)
	}
	return out, nil
}

// Snapshot returns the exact configuration bytes of variant under hash;
// ErrNotFound (also store.ErrNotFound) if the plant has none.
func (db *DB) Snapshot(ctx context.Context, variant, hash string) ([]byte, error) {
	var b []byte
	err := db.pool.QueryRow(ctx, `SELECT c.snapshot FROM configs c JOIN variants v ON v.id = c.variant_id
		WHERE v.name = $1 AND c.hash = $2`, variant, hash).Scan(&b)
	if errors.Is(err, pgx.ErrNoRows) {
		return nil, fmt.Errorf("snapshot of %s %s: %w: %w", variant, hash, ErrNotFound, store.ErrNotFound)
	}
	if err != nil {
		return nil, fmt.Errorf("snapshot of %s %s: %w", variant, hash, err)
	}
	if b == nil {
		b = []byte{}
	}
	return b, nil
}

// fewRunsWindow is the widest time window Runs reads as a few runs: drift
// looks up the run behind each alarm by its time.
const fewRunsWindow = time.Minute

// fewRunsFilter reports whether Runs reads the runs matching f as a few
// runs (fewRuns): one serial's, one panel's (its sites and retests), or a
// time window of a minute or less (drift's lookup of the run behind an
// alarm).
func fewRunsFilter(f store.Filter) bool {
	return f.Serial != "" || f.Panel != "" || (!f.Since.IsZero() && !f.Until.IsZero() && f.Until.Sub(f.Since) <= fewRunsWindow)
}

// fewRunsSQL is fewRuns' query of the runs matching f, with its arguments.
func fewRunsSQL(f store.Filter) (string, []any) {
	cond, args := where(f)
	return `SELECT r.log_id, r.local_id, r.serial, r.variant_id, r.config_id, r.station_id, r.fixture_id,
			r.operator, r.lot, r.software, r.started, r.finished, r.verdict, r.fail_code, r.trip_pf, r.driver, r.fault, r.panel, r.site
			FROM runs r WHERE ` + cond + ` ORDER BY r.at, r.log_id, r.local_id`, args
}

// fewRuns is Runs for a handful of runs (fewRunsFilter), where the plan
// matters more than the reading. The runs are read without joins (names
// come from the small tables) and their measurements by exact key, which
// prunes the month partitions when the query is planned. A panel's runs
// read through runsSQL took 166 ms on a 3,000,000-run plant even with the
// panel index (runs_panel): the joins' estimated cost made PostgreSQL
// start two parallel workers for 8 runs; read here, under 1 ms of the
// server's time (EXPLAIN ANALYZE; README "The plant store").
func (db *DB) fewRuns(ctx context.Context, f store.Filter) iter.Seq2[*store.Entry, error] {
	return func(yield func(*store.Entry, error) bool) {
		fail := func(err error) { yield(nil, fmt.Errorf("query plant runs: %w", err)) }
		q, args := fewRunsSQL(f)
		rows, err := db.pool.Query(ctx, q, args...)
		if err != nil {
			fail(err)
			return
		}
		type key struct {
			log      int32
			local    int64
			finished int64
		}
		var (
			out  []*store.Entry
			keys []key
			ids  [][4]int32 // variant, config, station, fixture
		)
		for rows.Next() {
			var (
				e            store.Entry
				k            key
				v, c, st, fx int32
				started      *int64
				verdict      string
				trip         *float64
				site         string
			)
			if err := rows.Scan(&k.log, &k.local, &e.Serial, &v, &c, &st, &fx, &e.Operator, &e.Lot, &e.Software, &started,
				&k.finished, &verdict, &e.FailCode, &trip, &e.Driver, &e.Fault, &e.Panel, &site); err != nil {
				rows.Close()
				fail(err)
				return
			}
			e.ID, e.Verdict, e.TripPF, e.Site = k.local, sequences.Verdict(verdict), orNaN(trip), siteNumber(site)
			if started != nil {
				e.Started = time.Unix(0, *started).UTC()
			}
			e.Finished = time.Unix(0, k.finished).UTC()
			out, keys, ids = append(out, &e), append(keys, k), append(ids, [4]int32{v, c, st, fx})
		}
		rows.Close()
		if err := rows.Err(); err != nil {
			fail(err)
			return
		}
		if len(out) == 0 {
			return
		}
		names, err := db.runNames(ctx, ids)
		if err != nil {
			fail(err)
			return
		}
		for i, e := range out {
			e.Variant, e.ConfigHash = names[0][ids[i][0]], names[1][ids[i][1]]
			e.Station, e.Fixture = names[2][ids[i][2]], names[3][ids[i][3]]
		}
		logs, locals, fins := make([]int32, len(keys)), make([]int64, len(keys)), make([]int64, len(keys))
		for i, k := range keys {
			logs[i], locals[i], fins[i] = k.log, k.local, k.finished
		}
		mrows, err := db.pool.Query(ctx, `SELECT m.log_id, m.local_id, m.seq, q.step, q.name, q.unit, m.value, m.low, m.high, m.verdict
			FROM measurements m JOIN quantities q ON q.id = m.quantity_id
			WHERE m.finished = ANY($3) AND (m.log_id, m.local_id, m.finished) IN (SELECT * FROM unnest($1::int[], $2::bigint[], $3::bigint[]))
			ORDER BY m.log_id, m.local_id, m.seq`, logs, locals, fins)
		if err != nil {
			fail(err)
			return
		}
		byKey := map[[2]int64]*store.Entry{}
		for i, k := range keys {
			byKey[[2]int64{int64(k.log), k.local}] = out[i]
		}
		var (
			lg                  int32
			lc                  int64
			seq                 int32
			step, name, unit, v string
			val, low, high      *float64
		)
		if _, err := pgx.ForEachRow(mrows, []any{&lg, &lc, &seq, &step, &name, &unit, &val, &low, &high, &v}, func() error {
			if e := byKey[[2]int64{int64(lg), lc}]; e != nil {
				e.Measurements = append(e.Measurements, sequences.Measurement{Step: sequences.StepName(step), Name: sequences.Quantity(name), Unit: unit,
					Value: orNaN(val), Low: orNaN(low), High: orNaN(high), Verdict: sequences.Verdict(v)})
			}
			return nil
		}); err != nil {
			fail(err)
			return
		}
		for _, e := range out {
			if !yield(e, nil) {
				return
			}
		}
	}
}

// runNames reads the names of the variants, configurations (their hash),
// stations and fixtures that ids (variant, config, station, fixture per
// run) name, in one round trip.
func (db *DB) runNames(ctx context.Context, ids [][4]int32) ([4]map[int32]string, error) {
	var (
		want  [4][]int32
		names [4]map[int32]string
		kind  int32
		id    int32
		label string
	)
	for _, r := range ids {
		for k := range want {
			want[k] = append(want[k], r[k])
		}
	}
	for k := range names {
		names[k] = map[int32]string{}
	}
	rows, err := db.pool.Query(ctx, `SELECT 0, id, name FROM variants WHERE id = ANY($1)
		UNION ALL SELECT 1, id, hash FROM configs WHERE id = ANY($2)
		UNION ALL SELECT 2, id, name FROM stations WHERE id = ANY($3)
		UNION ALL SELECT 3, id, name FROM fixtures WHERE id = ANY($4)`, want[0], want[1], want[2], want[3])
	if err != nil {
		return names, err
	}
	_, err = pgx.ForEachRow(rows, []any{&kind, &id, &label}, func() error {
		if kind >= 0 && int(kind) < len(names) {
			names[kind][id] = label
		}
		return nil
	})
	return names, err
}

// Drivers lists the station drivers the plant's runs were recorded with,
// in order ("" for runs forwarded before drivers were recorded).
func (db *DB) Drivers(ctx context.Context) ([]string, error) {
	// One EXISTS per known driver, each with its value written out, so
	// every probe is one look into the runs_driver index.
	known := []string{"", "gpio", "sim"}
	var has [3]bool
	if err := db.pool.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM runs WHERE driver = ''),
		EXISTS (SELECT 1 FROM runs WHERE driver = 'gpio'), EXISTS (SELECT 1 FROM runs WHERE driver = 'sim')`).
		Scan(&has[0], &has[1], &has[2]); err != nil {
		return nil, fmt.Errorf("plant drivers: %w", err)
	}
	var out []string
	for i, d := range known {
		if has[i] {
			out = append(out, d)
		}
	}
	return out, nil
}

// Trips streams the trip points of the runs matching f in time order, as
// store.DB.Trips does; groups asks for station, fixture, lot, line and site.
func (db *DB) Trips(ctx context.Context, f store.Filter, groups bool) iter.Seq2[store.TripPoint, error] {
	return func(yield func(store.TripPoint, error) bool) {
		if err := db.scanTrips(ctx, f, 0, groups, func(p store.TripPoint) bool { return yield(p, nil) }); err != nil {
			yield(store.TripPoint{}, err)
		}
	}
}

// RunPoints streams every run matching f in time order as a trip point
// with its verdict and its group under by (station, fixture, lot or line;
// the other group fields stay empty), TripPF NaN where the run has none (a
// station fault): drift reads its series and its groups' verdict totals in
// one pass over the variant's runs instead of two. Only the columns by
// needs are read: the series' read (TripSeries' with every group column)
// spent about a third of its client CPU on the columns drift --by station
// does not use.
func (db *DB) RunPoints(ctx context.Context, f store.Filter, by string) iter.Seq2[store.TripPoint, error] {
	return func(yield func(store.TripPoint, error) bool) {
		fail := func(err error) { yield(store.TripPoint{}, fmt.Errorf("plant runs of the series by %s: %w", by, err)) }
		col := map[string]string{"station": "r.station_id", "line": "r.station_id", "fixture": "r.fixture_id", "lot": "r.lot"}[by]
		if col == "" {
			fail(errors.New("want station, fixture, lot or line"))
			return
		}
		names, err := db.groupNames(ctx, by)
		if err != nil {
			fail(err)
			return
		}
		cond, args := where(f)
		rows, err := db.pool.Query(ctx, `SELECT r.local_id, r.at, r.trip_pf, r.verdict, `+col+` FROM runs r WHERE `+cond+
			` ORDER BY r.at, r.log_id, r.local_id`, args...)
		if err != nil {
			fail(err)
			return
		}
		defer rows.Close()
		// As scanTrips: numbers decoded from the binary format as they
		// arrive, strings shared with the point before where equal.
		fast := true
		for i, fd := range rows.FieldDescriptions() {
			if (i < 3 || i == 4 && names != nil) && fd.Format != pgx.BinaryFormatCode {
				fast = false
			}
		}
		var (
			p            store.TripPoint
			id, at       int64
			trip         *float64
			gid          int32 = -1
			gidN         int32
			vb, gb       []byte
			sv, sg       string
			verdict, grp string
		)
		slow := []any{&id, &at, &trip, &sv, &sg}
		if names != nil {
			slow[4] = &gidN
		}
		for rows.Next() {
			if fast {
				v := rows.RawValues()
				if len(v) != 5 || len(v[0]) != 8 || len(v[1]) != 8 || len(v[2]) != 8 && v[2] != nil || names != nil && len(v[4]) != 4 {
					fail(fmt.Errorf("a row of %d columns that is not (bigint, bigint, float8, text, int|text)", len(v)))
					return
				}
				id, at = int64(binary.BigEndian.Uint64(v[0])), int64(binary.BigEndian.Uint64(v[1]))
				p.TripPF = math.NaN()
				if v[2] != nil {
					p.TripPF = math.Float64frombits(binary.BigEndian.Uint64(v[2]))
				}
				vb = v[3]
				if names != nil {
					gidN = int32(binary.BigEndian.Uint32(v[4]))
				} else {
					gb = v[4]
				}
			} else {
				if err := rows.Scan(slow...); err != nil {
					fail(err)
					return
				}
				p.TripPF = orNaN(trip)
				vb, gb = []byte(sv), []byte(sg)
			}
			p.RunID, p.Finished = id, time.Unix(0, at).UTC()
			if string(vb) != verdict {
				verdict = string(vb)
				p.Verdict = sequences.Verdict(verdict)
			}
			if names != nil {
				if gidN != gid {
					gid, grp = gidN, names[gidN]
				}
			} else if string(gb) != grp {
				grp = string(gb)
			}
			switch by {
			case "station":
				p.Station = grp
			case "line":
				p.Line = grp
			case "fixture":
				p.Fixture = grp
			case "lot":
				p.Lot = grp
			}
			if !yield(p, nil) {
				return
			}
		}
		if err := rows.Err(); err != nil {
			fail(err)
		}
	}
}

// CountsBy is Counts for every group of the runs matching f at once, by
// station, fixture, lot, line or site: one grouped query instead of one
// query per group. The key is the group's station, fixture, lot or line
// name, or its site as text ("" for units tested alone). Each group's
// first-pass counts follow Counts' rule for the group's filter
// (firstTable).
func (db *DB) CountsBy(ctx context.Context, f store.Filter, by string) (map[string]store.Counts, error) {
	return db.countsBy(ctx, f, by, true)
}

// FirstCountsBy is CountsBy with only the first-pass counts (FirstUnits,
// FirstPass) filled: drift counts the runs' verdicts from the runs it
// streams (RunPoints) and asks the plant only for the first verdicts.
func (db *DB) FirstCountsBy(ctx context.Context, f store.Filter, by string) (map[string]store.Counts, error) {
	return db.countsBy(ctx, f, by, false)
}

func (db *DB) countsBy(ctx context.Context, f store.Filter, by string, runs bool) (map[string]store.Counts, error) {
	// Groups by the column itself (an id, not its text): casting each of a
	// million rows to text before hashing cost the first verdicts' scan
	// about half its time (EXPLAIN ANALYZE on plant_scale).
	col := map[string]string{"station": "r.station_id", "line": "r.station_id", "fixture": "r.fixture_id",
		"lot": "r.lot", "site": "r.site"}[by]
	if col == "" {
		return nil, fmt.Errorf("plant counts by %q: want station, fixture, lot, line or site", by)
	}
	cond, args := where(f)
	first := `SELECT ` + col + ` AS g, count(*) AS n, count(*) FILTER (WHERE r.verdict = 'pass') AS pass
   FROM ` + firstFrom(firstTable(f, by)) + ` WHERE ` + cond + ` GROUP BY 1`
	q := `SELECT a.g::text, a.n, a.pass, a.fail, a.sf, coalesce(b.n, 0), coalesce(b.pass, 0) FROM
  (SELECT ` + col + ` AS g, count(*) AS n, count(*) FILTER (WHERE r.verdict = 'pass') AS pass,
          count(*) FILTER (WHERE r.verdict = 'fail') AS fail, count(*) FILTER (WHERE r.verdict = 'station-fault') AS sf
   FROM runs r WHERE ` + cond + ` GROUP BY 1) a
  LEFT JOIN (` + first + `) b USING (g)`
	if !runs {
		q = `SELECT b.g::text, 0::bigint, 0::bigint, 0::bigint, 0::bigint, b.n, b.pass FROM (` + first + `) b`
	}
	rows, err := db.pool.Query(ctx, q, args...)
	if err != nil {
		return nil, fmt.Errorf("plant counts by %s: %w", by, err)
	}
	names, err := db.groupNames(ctx, by)
	if err != nil {
		rows.Close()
		return nil, fmt.Errorf("plant counts by %s: %w", by, err)
	}
	out := map[string]store.Counts{}
	var (
		g string
		c store.Counts
	)
	_, err = pgx.ForEachRow(rows, []any{&g, &c.Runs, &c.Pass, &c.Fail, &c.StationFault, &c.FirstUnits, &c.FirstPass}, func() error {
		if names != nil {
			id, _ := strconv.Atoi(g)
			g = names[int32(id)]
		}
		t := out[g]
		t.Runs, t.Pass, t.Fail, t.StationFault = t.Runs+c.Runs, t.Pass+c.Pass, t.Fail+c.Fail, t.StationFault+c.StationFault
		t.FirstUnits, t.FirstPass = t.FirstUnits+c.FirstUnits, t.FirstPass+c.FirstPass
		out[g] = t
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("plant counts by %s: %w", by, err)
	}
	return out, nil
}

// RunsAt finds, for each pair of ids[i] (a run's id in its station's shift
// log) and ats[i] (its plant time), the run of variant with that id at
// exactly that time: the one Runs lists first over that nanosecond, as
// store.DB.RunAt finds it, without its measurements; the zero Entry where
// there is none. It is one query for every pair: drift names the runs
// behind its alarms this way, not with one Runs per alarm.
func (db *DB) RunsAt(ctx context.Context, variant string, ids []int64, ats []time.Time) ([]store.Entry, error) {
	if len(ids) != len(ats) {
		return nil, fmt.Errorf("plant runs at: %d ids for %d times", len(ids), len(ats))
	}
	out := make([]store.Entry, len(ids))
	if len(ids) == 0 {
		return out, nil
	}
	ns := make([]int64, len(ats))
	for i, t := range ats {
		ns[i] = t.UnixNano()
	}
	// Each pair is one probe of the (variant_id, at, log_id, local_id)
	// index per month partition; the lowest log_id is the first in plant
	// order (at, log_id, local_id) among runs sharing id and time.
	// The names come from the small tables afterwards (runNames): joined
	// here, PostgreSQL rebuilt their hash tables once per pair.
	rows, err := db.pool.Query(ctx, `SELECT k.i, r.local_id, r.serial, r.variant_id, r.config_id, r.station_id, r.fixture_id,
		r.operator, r.lot, r.software, r.started, r.finished, r.verdict, r.fail_code, r.trip_pf, r.driver, r.fault, r.panel, r.site
		FROM unnest($1::bigint[], $2::bigint[]) WITH ORDINALITY AS k(id, at, i)
		CROSS JOIN LATERAL (SELECT * FROM runs r WHERE r.variant_id = (SELECT id FROM variants WHERE name = $3)
			AND r.at = k.at AND r.local_id = k.id ORDER BY r.log_id LIMIT 1) r`, ids, ns, variant)
	if err != nil {
		return nil, fmt.Errorf("plant runs of %s by id and time: %w", variant, err)
	}
	var (
		i       int64
		e       store.Entry
		id      [4]int32 // variant, config, station, fixture
		started *int64
		fin     int64
		verdict string
		trip    *float64
		site    string
		found   []int
		names   [][4]int32
	)
	_, err = pgx.ForEachRow(rows, []any{&i, &e.ID, &e.Serial, &id[0], &id[1], &id[2], &id[3], &e.Operator,
		&e.Lot, &e.Software, &started, &fin, &verdict, &e.FailCode, &trip, &e.Driver, &e.Fault, &e.Panel, &site}, func() error {
		if i < 1 || i > int64(len(out)) {
			return fmt.Errorf("row for pair %d of %d", i, len(out))
		}
		x := e
		if started != nil {
			x.Started = time.Unix(0, *started).UTC()
		}
		x.Finished, x.Verdict, x.TripPF, x.Site = time.Unix(0, fin).UTC(), sequences.Verdict(verdict), orNaN(trip), siteNumber(site)
		out[i-1] = x
		found, names = append(found, int(i-1)), append(names, id)
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("plant runs of %s by id and time: %w", variant, err)
	}
	if len(found) == 0 {
		return out, nil
	}
	n, err := db.runNames(ctx, names)
	if err != nil {
		return nil, fmt.Errorf("plant runs of %s by id and time: %w", variant, err)
	}
	for k, j := range found {
		out[j].Variant, out[j].ConfigHash = n[0][names[k][0]], n[1][names[k][1]]
		out[j].Station, out[j].Fixture = n[2][names[k][2]], n[3][names[k][3]]
	}
	return out, nil
}
