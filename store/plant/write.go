package plant

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"maps"
	"math"
	"slices"
	"strconv"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"padline/sequences"
	"padline/store"
)

// Batch is what one station sends in one transaction.
type Batch struct {
	// Log is the uuid of the station's shift log (store.Outbox.LogUUID) and
	// Station the forwarding station's name.
	Log, Station string
	// Sent is the station's clock when it sent the batch: the server
	// compares it with its own clock to measure the station's offset.
	Sent time.Time
	// Runs carry their id in the station's log in Entry.ID.
	Runs    []*store.Entry
	Checks  []store.StationCheck
	Studies []store.Study
	Relays  []store.RelayCount
	// Configs are the snapshots the runs name, keyed by variant and hash;
	// a configuration the plant already has need not be sent again.
	Configs []Config
	// Backlog is what the station has left to send after this batch, and
	// Profile the station facts the line board needs (JSON object).
	Backlog int64
	Profile json.RawMessage
}

// Config is one variant configuration snapshot.
type Config struct {
	Variant, Hash string
	Snapshot      []byte
	// FirstSeen is when the station's log first registered these bytes
	// (zero: now, on the server's clock).
	FirstSeen time.Time
}

// Result is what the plant store did with a batch.
type Result struct {
	// Landed counts rows newly stored; Duplicates rows it already had.
	Landed, Duplicates int
	// RunsLanded counts the runs among Landed.
	RunsLanded int
	// Refused lists the rows the database refused, with its reason.
	Refused []store.Refusal
	// Offset is the station's clock offset in use (server − station).
	Offset time.Duration
}

// offsetHysteresis is how far a measured clock offset must move from the
// one in use before it replaces it: network delay varies by milliseconds,
// and an offset that followed it would reorder a station's close runs.
const offsetHysteresis = time.Second

// rowError reports whether err is the database refusing data (an
// integrity or data error, or a row-level security violation) rather than
// the connection or the server failing: PostgreSQL error classes 22, 23
// and 42501 (PostgreSQL manual, Appendix A "PostgreSQL Error Codes").
func rowError(err error) bool {
	var pe *pgconn.PgError
	if !errors.As(err, &pe) {
		return false
	}
	return pe.Code[:2] == "22" || pe.Code[:2] == "23" || pe.Code == "42501"
}

// monthStart returns the first nanosecond of ns's UTC calendar month.
func monthStart(ns int64) int64 {
	t := time.Unix(0, ns).UTC()
	return time.Date(t.Year(), t.Month(), 1, 0, 0, 0, 0, time.UTC).UnixNano()
}

// ensureMonths creates the month partitions the runs need, each in its own
// short transaction before the batch (creating a partition locks the
// parent table, which must not happen inside a batch holding row locks).
func (db *DB) ensureMonths(ctx context.Context, runs []*store.Entry) error {
	need := map[int64]int64{}
	db.mu.Lock()
	for _, r := range runs {
		m := monthStart(r.Finished.UnixNano())
		if !db.months[m] {
			need[m] = r.Finished.UnixNano()
		}
	}
	db.mu.Unlock()
	for m, ns := range need {
		if _, err := db.pool.Exec(ctx, `SELECT plant_ensure_month($1)`, ns); err != nil {
			return fmt.Errorf("month partition: %w", err)
		}
		db.mu.Lock()
		db.months[m] = true
		db.mu.Unlock()
	}
	return nil
}

// Put stores a batch in one transaction: a small one (smallBatch runs at
// most) in two round trips (putSmall), a larger one's runs and
// measurements to staging tables by COPY, moved on in one statement (see
// moveSQL). Rows
// already stored are skipped (a replayed batch changes nothing). When the
// database refuses a row, the batch is stored again with each part under a
// savepoint, the runs halved until each refused run stands alone: the
// refused rows are reported in Result.Refused and the rest lands. Any
// other error (the server unreachable, an unregistered station) stores
// nothing.
func (db *DB) Put(ctx context.Context, b *Batch) (Result, error) {
	if err := db.ensureMonths(ctx, b.Runs); err != nil {
		return Result{}, fmt.Errorf("put batch of %s: %w", b.Station, err)
	}
	var (
		res Result
		x   *ids
		err error
	)
	if len(b.Runs) <= smallBatch {
		res, x, err = db.putSmall(ctx, b)
	} else {
		err = pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
			var err error
			res, x, err = db.put(ctx, tx, b, false)
			return err
		})
	}
	if err == nil || !rowError(err) {
		if err != nil {
			return Result{}, fmt.Errorf("put batch of %s: %w", b.Station, err)
		}
		db.remember(x.resolved)
		db.rememberLog(b, x)
		return res, nil
	}
	err = pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		var err error
		res, x, err = db.put(ctx, tx, b, true)
		return err
	})
	if err != nil {
		return Result{}, fmt.Errorf("put batch of %s: %w", b.Station, err)
	}
	db.remember(x.resolved)
	db.rememberLog(b, x)
	return res, nil
}

// knownLog is a shift log whose ids and clock offset a committed batch
// has stored.
type knownLog struct {
	station       string
	stationID, id int32
	offset        int64
}

// rememberLog keeps the ids and offset a committed batch of b stored.
func (db *DB) rememberLog(b *Batch, x *ids) {
	db.mu.Lock()
	defer db.mu.Unlock()
	if db.logs == nil {
		db.logs = map[string]knownLog{}
	}
	db.logs[b.Log] = knownLog{station: b.Station, stationID: x.station, id: x.log, offset: x.offset}
}

// ids maps names to ids for one batch.
type ids struct {
	station, log int32
	stations     map[string]int32
	variants     map[string]int32
	fixtures     map[string]int32
	configs      map[[2]string]int32
	quantities   map[[3]string]int32
	now          int64
	offset       int64
	stored       int64            // the log's offset before this batch
	resolved     map[string]int32 // to remember once the batch commits
}

// querier runs statements: a transaction, or a connection inside one.
type querier interface {
	Exec(ctx context.Context, sql string, args ...any) (pgconn.CommandTag, error)
	Query(ctx context.Context, sql string, args ...any) (pgx.Rows, error)
	QueryRow(ctx context.Context, sql string, args ...any) pgx.Row
}

func newIDs() *ids {
	return &ids{stations: map[string]int32{}, variants: map[string]int32{}, fixtures: map[string]int32{},
		configs: map[[2]string]int32{}, quantities: map[[3]string]int32{}, resolved: map[string]int32{}}
}

// smallBatch is the most runs a batch sends as arrays in one round trip
// (putSmall; two when a name or the log is new to this handle) rather
// than by COPY into staging tables in nine. On a slow line every unit is
// a batch of its own, and the staging path cost the station more CPU per
// unit than issue 17 allows (≤ 1 ms). Past about 200 runs COPY's cheaper
// encoding wins: BenchmarkPutBatch, station CPU per run at load 9-10,
// arrays (two round trips) against COPY: 1 run 699 µs against 2,443; 50
// runs 37.9 against 69.0; 200 runs 21.5 against 22.8; 500 runs 27.1
// against 17.6. In one round trip, 1 run: 418 µs against 2,076 (load 7).
var smallBatch = 200

// putSmall stores a batch of at most smallBatch runs in one transaction
// pipelined on one connection (pgx.Batch: one Sync for every statement,
// PostgreSQL manual, "Message Flow", "Extended Query"): BEGIN, the runs and
// measurements moved from arrays by one statement (moveArraysSQL, which
// applies the row-level policies and the first-verdict bookkeeping as
// moveSQL does), the station checks, studies, relay counts, the shift
// log's row and COMMIT. The statements take the server's clock from
// transaction_timestamp() and work the clock offset out from it as resolve
// does (offsetSQL), so a batch whose names and log this handle knows costs
// one round trip; else BEGIN and the lookups go first. A row error aborts
// the whole transaction (nothing stored): Put then stores the batch again
// on the staging path, under savepoints.
func (db *DB) putSmall(ctx context.Context, b *Batch) (Result, *ids, error) {
	var res Result
	x := newIDs()
	fast := len(b.Configs) == 0 && db.resolve(ctx, noQueries{}, b, x) == nil
	c, err := db.pool.Acquire(ctx)
	if err != nil {
		return res, x, err
	}
	defer c.Release() // a connection left in a transaction is closed, not reused
	conn := c.Conn()
	rollback := func() {
		if conn.PgConn().TxStatus() != 'I' && !conn.IsClosed() {
			rctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 5*time.Second)
			_, _ = conn.Exec(rctx, "ROLLBACK")
			cancel()
		}
	}
	pb := &pgx.Batch{}
	pb.Queue("BEGIN")
	if !fast {
		x = newIDs()
		pb.Queue(nowSQL).QueryRow(func(r pgx.Row) error { return r.Scan(&x.now) })
		err = conn.SendBatch(ctx, pb).Close()
		if err == nil {
			err = db.resolve(ctx, conn, b, x)
		}
		if err != nil {
			rollback()
			return res, x, err
		}
		pb = &pgx.Batch{}
	}
	sent := b.Sent.UnixNano()
	if len(b.Runs) > 0 {
		var landed, noted int64
		pb.Queue(moveArraysSQL, runArrays(b.Runs, x, sent)...).QueryRow(func(r pgx.Row) error {
			if err := r.Scan(&landed, &noted); err != nil {
				return err
			}
			res.Landed, res.Duplicates, res.RunsLanded = int(landed), len(b.Runs)-int(landed), int(landed)
			return nil
		})
	}
	count := func(tag pgconn.CommandTag) error {
		if tag.RowsAffected() == 1 {
			res.Landed++
		} else {
			res.Duplicates++
		}
		return nil
	}
	for _, c := range b.Checks {
		pb.Queue(checkSmallSQL, x.log, c.ID, idOrNil(x.stations, c.Station), idOrNil(x.fixtures, c.Fixture), c.Time.UnixNano(),
			c.StationHash, c.OK, c.LastRunID, string(c.Details), sent, x.stored).Exec(count)
	}
	for _, s := range b.Studies {
		pb.Queue(studySmallSQL, x.log, s.ID, idOrNil(x.stations, s.Station), idOrNil(x.fixtures, s.Fixture), s.Kind,
			s.Time.UnixNano(), string(s.Results), sent, x.stored).Exec(count)
	}
	if len(b.Relays) > 0 {
		args, err := relayArgs(b, x)
		if err != nil {
			rollback()
			return res, x, err
		}
		pb.Queue(relaySmallSQL, args[0], args[2], args[3], args[4]).Exec(func(pgconn.CommandTag) error { return nil })
	}
	la := logArgs(b, x)
	pb.Queue(logSmallSQL, la[0], la[1], la[2], la[4], sent, x.stored).QueryRow(func(r pgx.Row) error {
		return r.Scan(&x.now, &x.offset)
	})
	pb.Queue("COMMIT").Exec(func(tag pgconn.CommandTag) error {
		if tag.String() != "COMMIT" {
			return fmt.Errorf("plant batch not committed (%s)", tag)
		}
		return nil
	})
	if err := conn.SendBatch(ctx, pb).Close(); err != nil {
		rollback()
		return res, x, err
	}
	res.Offset = time.Duration(x.offset)
	return res, x, nil
}

// errNeedsQuery: resolve needs the database (noQueries).
var errNeedsQuery = errors.New("plant: lookup needs the database")

// noQueries is a querier that refuses every statement: resolve with it
// succeeds only when every id the batch names is known to this handle.
type noQueries struct{}

func (noQueries) Exec(context.Context, string, ...any) (pgconn.CommandTag, error) {
	return pgconn.CommandTag{}, errNeedsQuery
}
func (noQueries) Query(context.Context, string, ...any) (pgx.Rows, error) { return nil, errNeedsQuery }
func (noQueries) QueryRow(context.Context, string, ...any) pgx.Row        { return errRow{} }

type errRow struct{}

func (errRow) Scan(...any) error { return errNeedsQuery }

// serverNowSQL is the server's clock at the start of the transaction in
// ns, the same for every statement of it; offsetSQL is the station's clock
// offset that resolve would work out from it, given the station's send
// time ($S) and the log's offset so far ($K): kept unless the measured one
// is more than offsetHysteresis away.
const serverNowSQL = `(extract(epoch FROM transaction_timestamp()) * 1e9)::bigint`

func offsetSQL(sent, known string) string {
	return `(CASE WHEN abs(` + serverNowSQL + ` - ` + sent + `::bigint - ` + known + `::bigint) > ` +
		strconv.FormatInt(int64(offsetHysteresis), 10) + ` THEN ` + serverNowSQL + ` - ` + sent + `::bigint ELSE ` + known + `::bigint END)`
}

// The small path's statements (putSmall): as checkSQL, studySQL, relaySQL
// and logSQL, the receive time and offset worked out by the server.
var (
	checkSmallSQL = `INSERT INTO station_checks (log_id, local_id, station_id, fixture_id, time, received,
			station_hash, ok, last_run_id, details) VALUES ($1, $2, $3, $4, $5::bigint + ` + offsetSQL("$10", "$11") + `, ` + serverNowSQL + `,
			$6, $7, $8, $9) ON CONFLICT DO NOTHING`
	studySmallSQL = `INSERT INTO studies (log_id, local_id, station_id, fixture_id, kind, time, received, results)
			VALUES ($1, $2, $3, $4, $5, $6::bigint + ` + offsetSQL("$8", "$9") + `, ` + serverNowSQL + `, $7) ON CONFLICT DO NOTHING`
	relaySmallSQL = `INSERT INTO relay_wear (station_id, fixture_id, rung, count, updated)
		SELECT $1, f, r, c, ` + serverNowSQL + ` FROM unnest($2::int[], $3::int[], $4::bigint[]) AS u(f, r, c)
		ON CONFLICT (station_id, fixture_id, rung) DO UPDATE SET count = EXCLUDED.count, updated = EXCLUDED.updated`
	logSmallSQL = `UPDATE logs SET last_local_id = greatest(last_local_id, $2), backlog = $3,
		reported = ` + serverNowSQL + `, profile = $4, clock_offset_ns = ` + offsetSQL("$5", "$6") + ` WHERE id = $1
		RETURNING reported, clock_offset_ns`
)

// moveArraysSQL is moveSQL for runs and measurements sent as arrays
// (runArrays): $2 the station's send time and $3 the log's clock offset so
// far (offsetSQL), $4…$21 the runs' columns, $22…$28 the measurements'.
var moveArraysSQL = `WITH u AS (
	SELECT * FROM unnest($4::bigint[], $5::int[], $6::text[], $7::int[], $8::int[], $9::int[],
		$10::text[], $11::text[], $12::text[], $13::bigint[], $14::bigint[],
		$15::text[], $16::text[], $17::float8[], $18::text[], $19::text[], $20::text[], $21::text[]) WITH ORDINALITY
		AS u(local_id, station_id, serial, variant_id, config_id, fixture_id, operator, lot, software,
			started, finished, verdict, fail_code, trip_pf, driver, fault, site, panel, i)),
ins AS (
	INSERT INTO runs (log_id, local_id, station_id, serial, variant_id, config_id, fixture_id,
		operator, lot, software, started, finished, at, received, verdict, fail_code, trip_pf, driver, fault, site, panel)
	SELECT $1, local_id, station_id, serial, variant_id, config_id, fixture_id, operator, lot, software,
		started, finished, finished + ` + offsetSQL("$2", "$3") + `, ` + serverNowSQL + `, verdict, fail_code, trip_pf, driver, fault, site, panel
	FROM u ORDER BY i
	ON CONFLICT DO NOTHING
	RETURNING local_id, station_id, serial, variant_id, fixture_id, lot, site, finished, at, verdict),
meas AS (
	INSERT INTO measurements (log_id, local_id, finished, seq, station_id, quantity_id, value, low, high, verdict)
	SELECT $1, m.local_id, ins.finished, m.seq, ins.station_id, m.quantity_id, m.value, m.low, m.high, m.verdict
	FROM unnest($22::bigint[], $23::int[], $24::int[], $25::float8[], $26::float8[], $27::float8[], $28::text[])
		AS m(local_id, seq, quantity_id, value, low, high, verdict)
	JOIN ins ON ins.local_id = m.local_id),
first AS (
	SELECT plant_note_first(array_agg(serial), array_agg(at), array_agg($1::int), array_agg(local_id),
		array_agg(station_id), array_agg(variant_id), array_agg(fixture_id), array_agg(lot), array_agg(site), array_agg(verdict))
	FROM ins WHERE verdict <> $29)
SELECT (SELECT count(*) FROM ins), (SELECT count(*) FROM first)`

// runArrays is moveArraysSQL's arguments: the columns runSource and
// measSource feed COPY, one array each.
func runArrays(runs []*store.Entry, x *ids, sent int64) []any {
	n, nm := len(runs), 0
	for _, r := range runs {
		nm += len(r.Measurements)
	}
	var (
		localID                         = make([]int64, n)
		station, variant, config, fixt  = make([]*int32, n), make([]*int32, n), make([]*int32, n), make([]*int32, n)
		serial, operator, lot, software = make([]string, n), make([]string, n), make([]string, n), make([]string, n)
		verdict, failCode, driver       = make([]string, n), make([]string, n), make([]string, n)
		fault, site, panel              = make([]string, n), make([]string, n), make([]string, n)
		started                         = make([]*int64, n)
		finished                        = make([]int64, n)
		trip                            = make([]*float64, n)
		mLocal                          = make([]int64, 0, nm)
		mSeq, mQty                      = make([]int32, 0, nm), make([]*int32, 0, nm)
		mValue, mLow, mHigh             = make([]*float64, 0, nm), make([]*float64, 0, nm), make([]*float64, 0, nm)
		mVerdict                        = make([]string, 0, nm)
	)
	for i, r := range runs {
		localID[i] = r.ID
		station[i], variant[i] = idOrNil(x.stations, r.Station), idOrNil(x.variants, r.Variant)
		config[i], fixt[i] = idOrNil(x.configs, [2]string{r.Variant, r.ConfigHash}), idOrNil(x.fixtures, r.Fixture)
		serial[i], operator[i], lot[i], software[i] = r.Serial, r.Operator, r.Lot, r.Software
		started[i] = nullT(r.Started)
		finished[i] = r.Finished.UnixNano()
		verdict[i], failCode[i], trip[i] = string(r.Verdict), string(r.FailCode), nullF(r.TripPF)
		driver[i], fault[i], panel[i] = r.Driver, r.Fault, r.Panel
		if r.Site > 0 {
			site[i] = strconv.Itoa(r.Site)
		}
		for j, m := range r.Measurements {
			mLocal, mSeq = append(mLocal, r.ID), append(mSeq, int32(j))
			mQty = append(mQty, idOrNil(x.quantities, [3]string{string(m.Step), string(m.Name), m.Unit}))
			mValue, mLow, mHigh = append(mValue, nullF(m.Value)), append(mLow, nullF(m.Low)), append(mHigh, nullF(m.High))
			mVerdict = append(mVerdict, string(m.Verdict))
		}
	}
	return []any{x.log, sent, x.stored, localID, station, serial, variant, config, fixt, operator, lot, software,
		started, finished, verdict, failCode, trip, driver, fault, site, panel,
		mLocal, mSeq, mQty, mValue, mLow, mHigh, mVerdict, string(sequences.StationFault)}
}

// put stores b in tx and returns what it did and the ids it resolved.
func (db *DB) put(ctx context.Context, tx pgx.Tx, b *Batch, oneByOne bool) (Result, *ids, error) {
	x := newIDs()
	res, err := db.putIn(ctx, tx, b, oneByOne, x)
	return res, x, err
}

func (db *DB) putIn(ctx context.Context, tx pgx.Tx, b *Batch, oneByOne bool, x *ids) (Result, error) {
	var res Result
	if err := tx.QueryRow(ctx, nowSQL).Scan(&x.now); err != nil {
		return res, err
	}
	if err := db.resolve(ctx, tx, b, x); err != nil {
		return res, err
	}
	res.Offset = time.Duration(x.offset)
	if err := stageRuns(ctx, tx, b.Runs, x); err != nil {
		return res, err
	}
	// try runs f under a savepoint (one-by-one mode only): a row error
	// rolls back to it and is returned, anything else fails the batch.
	try := func(f func() error) error {
		if !oneByOne {
			return f()
		}
		if _, err := tx.Exec(ctx, "SAVEPOINT row"); err != nil {
			return err
		}
		if err := f(); err != nil {
			if rowError(err) {
				if _, err2 := tx.Exec(ctx, "ROLLBACK TO SAVEPOINT row"); err2 != nil {
					return err2
				}
			}
			return err
		}
		_, err := tx.Exec(ctx, "RELEASE SAVEPOINT row")
		return err
	}
	// Move the staged runs [lo, hi): all at once; in one-by-one mode a
	// range the database refuses is halved until the refused runs stand
	// alone, so k bad runs in n cost about 2·k·log2(n) statements.
	var move func(lo, hi int) error
	move = func(lo, hi int) error {
		var landed int
		err := try(func() error {
			var err error
			landed, err = moveRuns(ctx, tx, lo, hi, x)
			return err
		})
		switch {
		case err == nil:
			res.Landed, res.Duplicates, res.RunsLanded = res.Landed+landed, res.Duplicates+hi-lo-landed, res.RunsLanded+landed
			return nil
		case !oneByOne || !rowError(err):
			return err
		case hi-lo == 1:
			res.Refused = append(res.Refused, store.Refusal{Kind: "run", LocalID: b.Runs[lo].ID, Reason: err.Error()})
			return nil
		}
		mid := lo + (hi-lo)/2
		if err := move(lo, mid); err != nil {
			return err
		}
		return move(mid, hi)
	}
	if len(b.Runs) > 0 {
		if err := move(0, len(b.Runs)); err != nil {
			return res, err
		}
	}
	trust := func(kind string, id int64, f func() (int, int, error)) error {
		var n, dup int
		err := try(func() error {
			var err error
			n, dup, err = f()
			return err
		})
		if err != nil {
			if !oneByOne || !rowError(err) {
				return err
			}
			res.Refused = append(res.Refused, store.Refusal{Kind: kind, LocalID: id, Reason: err.Error()})
			return nil
		}
		res.Landed, res.Duplicates = res.Landed+n, res.Duplicates+dup
		return nil
	}
	for _, c := range b.Checks {
		if err := trust("check", c.ID, func() (int, int, error) {
			return db.putTrust(ctx, tx, b, []store.StationCheck{c}, nil, x)
		}); err != nil {
			return res, err
		}
	}
	for _, s := range b.Studies {
		if err := trust("study", s.ID, func() (int, int, error) {
			return db.putTrust(ctx, tx, b, nil, []store.Study{s}, x)
		}); err != nil {
			return res, err
		}
	}
	if err := db.putRelays(ctx, tx, b, x); err != nil {
		return res, err
	}
	_, err := tx.Exec(ctx, logSQL, logArgs(b, x)...)
	return res, err
}

// nowSQL is the server's clock, in ns since the epoch: the batch's
// receive time.
const nowSQL = `SELECT (extract(epoch FROM clock_timestamp()) * 1e9)::bigint`

// logSQL notes a stored batch on its shift log's row (logArgs).
const logSQL = `UPDATE logs SET last_local_id = greatest(last_local_id, $2), backlog = $3,
		reported = $4, profile = $5, clock_offset_ns = $6 WHERE id = $1`

func logArgs(b *Batch, x *ids) []any {
	var last int64
	for _, r := range b.Runs {
		last = max(last, r.ID)
	}
	profile := b.Profile
	if len(profile) == 0 {
		profile = json.RawMessage("{}")
	}
	return []any{x.log, last, b.Backlog, x.now, string(profile), x.offset}
}

// resolve finds or creates the ids the batch names: its station and log
// (measuring the clock offset), variants, fixtures, configurations and
// quantities.
func (db *DB) resolve(ctx context.Context, tx querier, b *Batch, x *ids) error {
	var offset int64
	db.mu.Lock()
	l, ok := db.logs[b.Log]
	db.mu.Unlock()
	if ok && l.station == b.Station {
		// A log this handle has sent a batch of: its ids and offset are
		// known, so the batch needs no lookups before its rows.
		x.station, x.log, offset = l.stationID, l.id, l.offset
	} else {
		err := tx.QueryRow(ctx, `SELECT id FROM stations WHERE name = $1`, b.Station).Scan(&x.station)
		if errors.Is(err, pgx.ErrNoRows) {
			return fmt.Errorf("%w: %s (register it with 'padline plant add-station')", ErrUnknownStation, b.Station)
		}
		if err != nil {
			return err
		}
		var logStation int32
		err = tx.QueryRow(ctx, `INSERT INTO logs (uuid, station_id) VALUES ($1, $2)
			ON CONFLICT (uuid) DO UPDATE SET uuid = EXCLUDED.uuid RETURNING id, station_id, clock_offset_ns`,
			b.Log, x.station).Scan(&x.log, &logStation, &offset)
		if err != nil {
			return fmt.Errorf("shift log %s: %w", b.Log, err)
		}
		if logStation != x.station {
			return fmt.Errorf("shift log %s belongs to another station than %s", b.Log, b.Station)
		}
	}
	x.offset, x.stored = offset, offset
	if measured := x.now - b.Sent.UnixNano(); time.Duration(abs(measured-offset)) > offsetHysteresis {
		x.offset = measured
	}
	names := func(table string, m map[string]int32, all []string) error {
		var want []string
		for _, n := range all {
			if id, ok := db.cached(table + "\x00" + n); ok {
				m[n] = id
			} else {
				want = append(want, n)
			}
		}
		if len(want) == 0 {
			return nil
		}
		defer func() {
			for _, n := range want {
				if id, ok := m[n]; ok {
					x.resolved[table+"\x00"+n] = id
				}
			}
		}()
		if table != "stations" {
			if _, err := tx.Exec(ctx, `INSERT INTO `+table+` (name) SELECT unnest($1::text[]) ON CONFLICT DO NOTHING`, want); err != nil {
				return fmt.Errorf("%s: %w", table, err)
			}
		}
		rows, err := tx.Query(ctx, `SELECT id, name FROM `+table+` WHERE name = ANY($1)`, want)
		if err != nil {
			return fmt.Errorf("%s: %w", table, err)
		}
		var id int32
		var name string
		_, err = pgx.ForEachRow(rows, []any{&id, &name}, func() error { m[name] = id; return nil })
		return err
	}
	set := func(m map[string]bool, s string) { m[s] = true }
	st, va, fx := map[string]bool{}, map[string]bool{}, map[string]bool{}
	qs := map[[3]string]bool{}
	cf := map[[2]string]bool{}
	for _, r := range b.Runs {
		set(st, r.Station)
		set(va, r.Variant)
		set(fx, r.Fixture)
		cf[[2]string{r.Variant, r.ConfigHash}] = true
		for _, m := range r.Measurements {
			qs[[3]string{string(m.Step), string(m.Name), m.Unit}] = true
		}
	}
	for _, c := range b.Checks {
		set(st, c.Station)
		set(fx, c.Fixture)
	}
	for _, s := range b.Studies {
		set(st, s.Station)
		set(fx, s.Fixture)
	}
	for _, r := range b.Relays {
		set(fx, r.Fixture)
	}
	for _, c := range b.Configs {
		set(va, c.Variant)
	}
	// Names are inserted in sorted order: two batches adding the same new
	// names at once (two stations, or a catch-up's two halves) then wait
	// for each other instead of deadlocking.
	keys := func(m map[string]bool) []string {
		return slices.Sorted(maps.Keys(m))
	}
	if err := names("stations", x.stations, keys(st)); err != nil {
		return err
	}
	if err := names("variants", x.variants, keys(va)); err != nil {
		return err
	}
	if err := names("fixtures", x.fixtures, keys(fx)); err != nil {
		return err
	}
	for _, c := range b.Configs {
		snap := c.Snapshot
		if snap == nil {
			snap = []byte{}
		}
		seen := x.now
		if !c.FirstSeen.IsZero() {
			seen = c.FirstSeen.UnixNano()
		}
		if _, err := tx.Exec(ctx, `INSERT INTO configs (variant_id, hash, snapshot, first_seen) VALUES ($1, $2, $3, $4)
			ON CONFLICT (variant_id, hash) DO NOTHING`, x.variants[c.Variant], c.Hash, snap, seen); err != nil {
			return fmt.Errorf("config %s %s: %w", c.Variant, c.Hash, err)
		}
	}
	for k := range cf {
		if id, ok := db.cached("configs\x00" + k[0] + "\x00" + k[1]); ok {
			x.configs[k] = id
			delete(cf, k)
		}
	}
	if len(cf) > 0 {
		var vs, hs []string
		for k := range cf {
			vs, hs = append(vs, k[0]), append(hs, k[1])
		}
		defer func() {
			for k := range cf {
				if id, ok := x.configs[k]; ok {
					x.resolved["configs\x00"+k[0]+"\x00"+k[1]] = id
				}
			}
		}()
		rows, err := tx.Query(ctx, `SELECT c.id, v.name, c.hash FROM configs c JOIN variants v ON v.id = c.variant_id
			JOIN unnest($1::text[], $2::text[]) AS u(v, h) ON u.v = v.name AND u.h = c.hash`, vs, hs)
		if err != nil {
			return fmt.Errorf("configs: %w", err)
		}
		var id int32
		var v, h string
		if _, err := pgx.ForEachRow(rows, []any{&id, &v, &h}, func() error { x.configs[[2]string{v, h}] = id; return nil }); err != nil {
			return fmt.Errorf("configs: %w", err)
		}
	}
	for k := range qs {
		if id, ok := db.cached("quantities\x00" + k[0] + "\x00" + k[1] + "\x00" + k[2]); ok {
			x.quantities[k] = id
			delete(qs, k)
		}
	}
	if len(qs) > 0 {
		defer func() {
			for k := range qs {
				if id, ok := x.quantities[k]; ok {
					x.resolved["quantities\x00"+k[0]+"\x00"+k[1]+"\x00"+k[2]] = id
				}
			}
		}()
		var a, bb, c []string
		for _, k := range slices.SortedFunc(maps.Keys(qs), func(p, q [3]string) int { return slices.Compare(p[:], q[:]) }) {
			a, bb, c = append(a, k[0]), append(bb, k[1]), append(c, k[2])
		}
		if _, err := tx.Exec(ctx, `INSERT INTO quantities (step, name, unit) SELECT * FROM unnest($1::text[], $2::text[], $3::text[])
			ON CONFLICT DO NOTHING`, a, bb, c); err != nil {
			return fmt.Errorf("quantities: %w", err)
		}
		rows, err := tx.Query(ctx, `SELECT q.id, q.step, q.name, q.unit FROM quantities q
			JOIN unnest($1::text[], $2::text[], $3::text[]) AS u(s, n, un) ON u.s = q.step AND u.n = q.name AND u.un = q.unit`, a, bb, c)
		if err != nil {
			return fmt.Errorf("quantities: %w", err)
		}
		var id int32
		var s, n, u string
		if _, err := pgx.ForEachRow(rows, []any{&id, &s, &n, &u}, func() error { x.quantities[[3]string{s, n, u}] = id; return nil }); err != nil {
			return fmt.Errorf("quantities: %w", err)
		}
	}
	return nil
}

func abs(v int64) int64 {
	if v < 0 {
		return -v
	}
	return v
}

// idOrNil is an id, or NULL when the name is unknown: the database then
// refuses the row (NOT NULL), as it refuses a station not its own (RLS).
func idOrNil[K comparable](m map[K]int32, k K) *int32 {
	if id, ok := m[k]; ok {
		return &id
	}
	return nil
}

func nullF(v float64) *float64 {
	if math.IsNaN(v) {
		return nil
	}
	return &v
}

func nullT(t time.Time) *int64 {
	if t.IsZero() {
		return nil
	}
	ns := t.UnixNano()
	return &ns
}

// The staging tables: a batch's runs and measurements go in by COPY (the
// fast way in: PostgreSQL manual, "Populating a Database", 14.4.2), then
// move to runs and measurements with INSERT … SELECT, which applies the
// row-level policies (COPY into a table with row-level security is refused
// for a role they bind) and skips runs the plant already has (ON CONFLICT
// DO NOTHING on the run's key). They are the session's own and lose their
// rows when the batch's transaction ends, committed or not.
const stagingSQL = `CREATE TEMP TABLE IF NOT EXISTS plant_runs_in (
	i int, local_id bigint, station_id int, serial text, variant_id int, config_id int, fixture_id int,
	operator text, lot text, software text, started bigint, finished bigint, at bigint,
	verdict text, fail_code text, trip_pf float8, driver text, fault text, site text, panel text) ON COMMIT DELETE ROWS;
CREATE TEMP TABLE IF NOT EXISTS plant_measurements_in (
	local_id bigint, seq int, quantity_id int, value float8, low float8, high float8, verdict text) ON COMMIT DELETE ROWS`

var (
	runsInCols = []string{"i", "local_id", "station_id", "serial", "variant_id", "config_id", "fixture_id",
		"operator", "lot", "software", "started", "finished", "at", "verdict", "fail_code", "trip_pf", "driver", "fault", "site", "panel"}
	measInCols = []string{"local_id", "seq", "quantity_id", "value", "low", "high", "verdict"}
)

// stageRuns copies runs, in batch order (column i), and their measurements
// into the staging tables.
func stageRuns(ctx context.Context, tx pgx.Tx, runs []*store.Entry, x *ids) error {
	if len(runs) == 0 {
		return nil
	}
	if _, err := tx.Exec(ctx, stagingSQL); err != nil {
		return fmt.Errorf("staging tables: %w", err)
	}
	if _, err := tx.CopyFrom(ctx, pgx.Identifier{"plant_runs_in"}, runsInCols, &runSource{runs: runs, x: x, i: -1}); err != nil {
		return fmt.Errorf("copy runs: %w", err)
	}
	if _, err := tx.CopyFrom(ctx, pgx.Identifier{"plant_measurements_in"}, measInCols, &measSource{runs: runs, x: x, i: -1}); err != nil {
		return fmt.Errorf("copy measurements: %w", err)
	}
	return nil
}

// runSource feeds runs to COPY, one row each.
type runSource struct {
	runs []*store.Entry
	x    *ids
	i    int
	row  [20]any
}

func (s *runSource) Next() bool { s.i++; return s.i < len(s.runs) }
func (s *runSource) Err() error { return nil }
func (s *runSource) Values() ([]any, error) {
	r, x := s.runs[s.i], s.x
	site := ""
	if r.Site > 0 {
		site = strconv.Itoa(r.Site)
	}
	fin := r.Finished.UnixNano()
	s.row = [20]any{int32(s.i), r.ID, idOrNil(x.stations, r.Station), r.Serial, idOrNil(x.variants, r.Variant),
		idOrNil(x.configs, [2]string{r.Variant, r.ConfigHash}), idOrNil(x.fixtures, r.Fixture),
		r.Operator, r.Lot, r.Software, nullT(r.Started), fin, fin + x.offset,
		string(r.Verdict), string(r.FailCode), nullF(r.TripPF), r.Driver, r.Fault, site, r.Panel}
	return s.row[:], nil
}

// measSource feeds the runs' measurements to COPY, one row each.
type measSource struct {
	runs []*store.Entry
	x    *ids
	i, j int // run, measurement
	row  [7]any
}

func (s *measSource) Next() bool {
	s.j++
	for s.i < 0 || s.i < len(s.runs) && s.j >= len(s.runs[s.i].Measurements) {
		s.i, s.j = s.i+1, 0
	}
	return s.i < len(s.runs)
}
func (s *measSource) Err() error { return nil }
func (s *measSource) Values() ([]any, error) {
	r := s.runs[s.i]
	m := r.Measurements[s.j]
	s.row = [7]any{r.ID, int32(s.j), idOrNil(s.x.quantities, [3]string{string(m.Step), string(m.Name), m.Unit}),
		nullF(m.Value), nullF(m.Low), nullF(m.High), string(m.Verdict)}
	return s.row[:], nil
}

// moveSQL moves the staged runs with i in [$3, $4) in one statement: the
// runs the plant does not have yet (ON CONFLICT DO NOTHING: a replayed run
// is skipped), the measurements of exactly those runs, and those runs
// (station faults aside) offered to plant_note_first as their serials'
// first verdicts. It returns how many runs it stored.
const moveSQL = `WITH ins AS (
	INSERT INTO runs (log_id, local_id, station_id, serial, variant_id, config_id, fixture_id,
		operator, lot, software, started, finished, at, received, verdict, fail_code, trip_pf, driver, fault, site, panel)
	SELECT $1, local_id, station_id, serial, variant_id, config_id, fixture_id, operator, lot, software,
		started, finished, at, $2, verdict, fail_code, trip_pf, driver, fault, site, panel
	FROM plant_runs_in WHERE i >= $3 AND i < $4 ORDER BY i
	ON CONFLICT DO NOTHING
	RETURNING local_id, station_id, serial, variant_id, fixture_id, lot, site, finished, at, verdict),
meas AS (
	INSERT INTO measurements (log_id, local_id, finished, seq, station_id, quantity_id, value, low, high, verdict)
	SELECT $1, m.local_id, ins.finished, m.seq, ins.station_id, m.quantity_id, m.value, m.low, m.high, m.verdict
	FROM plant_measurements_in m JOIN ins ON ins.local_id = m.local_id),
first AS (
	SELECT plant_note_first(array_agg(serial), array_agg(at), array_agg($1::int), array_agg(local_id),
		array_agg(station_id), array_agg(variant_id), array_agg(fixture_id), array_agg(lot), array_agg(site), array_agg(verdict))
	FROM ins WHERE verdict <> $5)
SELECT (SELECT count(*) FROM ins), (SELECT count(*) FROM first)`

// moveRuns moves the staged runs [lo, hi) and returns how many were new.
func moveRuns(ctx context.Context, tx pgx.Tx, lo, hi int, x *ids) (int, error) {
	var landed, noted int64
	if err := tx.QueryRow(ctx, moveSQL, x.log, x.now, lo, hi, string(sequences.StationFault)).Scan(&landed, &noted); err != nil {
		return 0, err
	}
	return int(landed), nil
}

// checkSQL and studySQL insert one station check and one study
// (checkArgs, studyArgs); a stored one is skipped.
const (
	checkSQL = `INSERT INTO station_checks (log_id, local_id, station_id, fixture_id, time, received,
			station_hash, ok, last_run_id, details) VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10) ON CONFLICT DO NOTHING`
	studySQL = `INSERT INTO studies (log_id, local_id, station_id, fixture_id, kind, time, received, results)
			VALUES ($1, $2, $3, $4, $5, $6, $7, $8) ON CONFLICT DO NOTHING`
)

func checkArgs(c store.StationCheck, x *ids) []any {
	return []any{x.log, c.ID, idOrNil(x.stations, c.Station), idOrNil(x.fixtures, c.Fixture), c.Time.UnixNano() + x.offset, x.now,
		c.StationHash, c.OK, c.LastRunID, string(c.Details)}
}

func studyArgs(s store.Study, x *ids) []any {
	return []any{x.log, s.ID, idOrNil(x.stations, s.Station), idOrNil(x.fixtures, s.Fixture), s.Kind, s.Time.UnixNano() + x.offset, x.now, string(s.Results)}
}

// putTrust inserts station checks and studies.
func (db *DB) putTrust(ctx context.Context, tx pgx.Tx, b *Batch, checks []store.StationCheck, studies []store.Study, x *ids) (landed, dup int, err error) {
	for _, c := range checks {
		tag, err := tx.Exec(ctx, checkSQL, checkArgs(c, x)...)
		if err != nil {
			return landed, dup, err
		}
		if tag.RowsAffected() == 1 {
			landed++
		} else {
			dup++
		}
	}
	for _, s := range studies {
		tag, err := tx.Exec(ctx, studySQL, studyArgs(s, x)...)
		if err != nil {
			return landed, dup, err
		}
		if tag.RowsAffected() == 1 {
			landed++
		} else {
			dup++
		}
	}
	return landed, dup, nil
}

// relaySQL stores the station's latest relay counts (relayArgs).
const relaySQL = `INSERT INTO relay_wear (station_id, fixture_id, rung, count, updated)
		SELECT $1, f, r, c, $2 FROM unnest($3::int[], $4::int[], $5::bigint[]) AS u(f, r, c)
		ON CONFLICT (station_id, fixture_id, rung) DO UPDATE SET count = EXCLUDED.count, updated = EXCLUDED.updated`

func relayArgs(b *Batch, x *ids) ([]any, error) {
	fix, rung, count := make([]int32, len(b.Relays)), make([]int32, len(b.Relays)), make([]int64, len(b.Relays))
	for i, r := range b.Relays {
		if r.Count > math.MaxInt64 {
			return nil, fmt.Errorf("relay count of %s rung %d too large", r.Fixture, r.Rung)
		}
		fix[i], rung[i], count[i] = x.fixtures[r.Fixture], int32(r.Rung), int64(r.Count)
	}
	return []any{x.station, x.now, fix, rung, count}, nil
}

// putRelays stores the station's latest relay counts in one statement.
func (db *DB) putRelays(ctx context.Context, tx pgx.Tx, b *Batch, x *ids) error {
	if len(b.Relays) == 0 {
		return nil
	}
	args, err := relayArgs(b, x)
	if err != nil {
		return err
	}
	if _, err := tx.Exec(ctx, relaySQL, args...); err != nil {
		return fmt.Errorf("relay wear: %w", err)
	}
	return nil
}
