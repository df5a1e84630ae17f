package plant

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
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

// Put stores a batch in one transaction. Rows already stored are skipped
// (a replayed batch changes nothing). When the database refuses a row, the
// batch is stored again row by row, each under a savepoint: the refused
// rows are reported in Result.Refused and the rest lands. Any other error
// (the server unreachable, an unregistered station) stores nothing.
func (db *DB) Put(ctx context.Context, b *Batch) (Result, error) {
	if err := db.ensureMonths(ctx, b.Runs); err != nil {
		return Result{}, fmt.Errorf("put batch of %s: %w", b.Station, err)
	}
	var (
		res Result
		x   *ids
	)
	err := pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		var err error
		res, x, err = db.put(ctx, tx, b, false)
		return err
	})
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
	resolved     map[string]int32 // to remember once the batch commits
}

// put stores b in tx and returns what it did and the ids it resolved.
func (db *DB) put(ctx context.Context, tx pgx.Tx, b *Batch, oneByOne bool) (Result, *ids, error) {
	x := &ids{stations: map[string]int32{}, variants: map[string]int32{}, fixtures: map[string]int32{},
		configs: map[[2]string]int32{}, quantities: map[[3]string]int32{}, resolved: map[string]int32{}}
	res, err := db.putIn(ctx, tx, b, oneByOne, x)
	return res, x, err
}

func (db *DB) putIn(ctx context.Context, tx pgx.Tx, b *Batch, oneByOne bool, x *ids) (Result, error) {
	var res Result
	if err := tx.QueryRow(ctx, `SELECT (extract(epoch FROM clock_timestamp()) * 1e9)::bigint`).Scan(&x.now); err != nil {
		return res, err
	}
	if err := db.resolve(ctx, tx, b, x); err != nil {
		return res, err
	}
	res.Offset = time.Duration(x.offset)
	if !oneByOne {
		n, dup, err := db.putRuns(ctx, tx, b.Runs, x)
		if err != nil {
			return res, err
		}
		res.Landed, res.Duplicates, res.RunsLanded = n, dup, n
		n, dup, err = db.putTrust(ctx, tx, b, b.Checks, b.Studies, x)
		if err != nil {
			return res, err
		}
		res.Landed, res.Duplicates = res.Landed+n, res.Duplicates+dup
	} else {
		try := func(kind string, id int64, f func() (int, int, error)) error {
			if _, err := tx.Exec(ctx, "SAVEPOINT row"); err != nil {
				return err
			}
			n, dup, err := f()
			if err != nil {
				if !rowError(err) {
					return err
				}
				if _, err2 := tx.Exec(ctx, "ROLLBACK TO SAVEPOINT row"); err2 != nil {
					return err2
				}
				res.Refused = append(res.Refused, store.Refusal{Kind: kind, LocalID: id, Reason: err.Error()})
				return nil
			}
			res.Landed, res.Duplicates = res.Landed+n, res.Duplicates+dup
			_, err = tx.Exec(ctx, "RELEASE SAVEPOINT row")
			return err
		}
		for _, r := range b.Runs {
			if err := try("run", r.ID, func() (int, int, error) {
				n, dup, err := db.putRuns(ctx, tx, []*store.Entry{r}, x)
				if err == nil {
					res.RunsLanded += n
				}
				return n, dup, err
			}); err != nil {
				return res, err
			}
		}
		for _, c := range b.Checks {
			if err := try("check", c.ID, func() (int, int, error) {
				return db.putTrust(ctx, tx, b, []store.StationCheck{c}, nil, x)
			}); err != nil {
				return res, err
			}
		}
		for _, s := range b.Studies {
			if err := try("study", s.ID, func() (int, int, error) {
				return db.putTrust(ctx, tx, b, nil, []store.Study{s}, x)
			}); err != nil {
				return res, err
			}
		}
	}
	if err := db.putRelays(ctx, tx, b, x); err != nil {
		return res, err
	}
	var last int64
	for _, r := range b.Runs {
		last = max(last, r.ID)
	}
	profile := b.Profile
	if len(profile) == 0 {
		profile = json.RawMessage("{}")
	}
	_, err := tx.Exec(ctx, `UPDATE logs SET last_local_id = greatest(last_local_id, $2), backlog = $3,
		reported = $4, profile = $5, clock_offset_ns = $6 WHERE id = $1`, x.log, last, b.Backlog, x.now, string(profile), x.offset)
	return res, err
}

// resolve finds or creates the ids the batch names: its station and log
// (measuring the clock offset), variants, fixtures, configurations and
// quantities.
func (db *DB) resolve(ctx context.Context, tx pgx.Tx, b *Batch, x *ids) error {
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
	x.offset = offset
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
	keys := func(m map[string]bool) []string {
		out := make([]string, 0, len(m))
		for k := range m {
			out = append(out, k)
		}
		return out
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
		for k := range qs {
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

// putRuns inserts runs and, for those newly stored, their measurements.
func (db *DB) putRuns(ctx context.Context, tx pgx.Tx, runs []*store.Entry, x *ids) (landed, dup int, err error) {
	if len(runs) == 0 {
		return 0, 0, nil
	}
	n := len(runs)
	var (
		local                      = make([]int64, n)
		station, variant, cfg, fix = make([]*int32, n), make([]*int32, n), make([]*int32, n), make([]*int32, n)
		serial, op, lot, sw        = make([]string, n), make([]string, n), make([]string, n), make([]string, n)
		verdict, code              = make([]string, n), make([]string, n)
		driver, fault, site        = make([]string, n), make([]string, n), make([]string, n)
		started                    = make([]*int64, n)
		finished, at               = make([]int64, n), make([]int64, n)
		trip                       = make([]*float64, n)
	)
	byID := make(map[int64]*store.Entry, n)
	for i, r := range runs {
		byID[r.ID] = r
		local[i] = r.ID
		station[i] = idOrNil(x.stations, r.Station)
		variant[i] = idOrNil(x.variants, r.Variant)
		cfg[i] = idOrNil(x.configs, [2]string{r.Variant, r.ConfigHash})
		fix[i] = idOrNil(x.fixtures, r.Fixture)
		serial[i], op[i], lot[i], sw[i] = r.Serial, r.Operator, r.Lot, r.Software
		verdict[i], code[i] = string(r.Verdict), string(r.FailCode)
		driver[i], fault[i] = r.Driver, r.Fault
		if r.Site > 0 {
			site[i] = strconv.Itoa(r.Site)
		}
		started[i] = nullT(r.Started)
		finished[i] = r.Finished.UnixNano()
		at[i] = finished[i] + x.offset
		trip[i] = nullF(r.TripPF)
	}
	var rows pgx.Rows

	if n <= smallBatch {
		rows, err = tx.Query(ctx, `INSERT INTO runs (log_id, local_id, station_id, serial, variant_id, config_id, fixture_id,
			operator, lot, software, started, finished, at, received, verdict, fail_code, trip_pf, driver, fault, site)
			SELECT $1, u.local, u.station, u.serial, u.variant, u.cfg, u.fix, u.op, u.lot, u.sw, u.started, u.finished, u.at,
				$2, u.verdict, u.code, u.trip, u.driver, u.fault, u.site
			FROM unnest($3::bigint[], $4::int[], $5::text[], $6::int[], $7::int[], $8::int[], $9::text[], $10::text[],
				$11::text[], $12::bigint[], $13::bigint[], $14::bigint[], $15::text[], $16::text[], $17::float8[], $18::text[], $19::text[], $20::text[])
				AS u(local, station, serial, variant, cfg, fix, op, lot, sw, started, finished, at, verdict, code, trip, driver, fault, site)
			ON CONFLICT DO NOTHING RETURNING local_id`,
			x.log, x.now, local, station, serial, variant, cfg, fix, op, lot, sw, started, finished, at, verdict, code, trip, driver, fault, site)
	} else {
		rows, err = db.copyRuns(ctx, tx, x, local, station, serial, variant, cfg, fix, op, lot, sw, started, finished, at, verdict, code, trip, driver, fault, site)
	}
	if err != nil {
		return 0, 0, err
	}
	var fresh []int64
	var id int64
	if _, err := pgx.ForEachRow(rows, []any{&id}, func() error { fresh = append(fresh, id); return nil }); err != nil {
		return 0, 0, err
	}
	if n > smallBatch {
		if _, err := tx.Exec(ctx, `TRUNCATE runs_in`); err != nil {
			return 0, 0, err
		}
	}
	var (
		fSerial, fLot, fSite, fVerdict []string
		fAt, fLocal                    []int64
		fLog, fSt, fVa, fFx            []int32
	)
	deref := func(p *int32) int32 {
		if p == nil {
			return 0
		}
		return *p
	}
	for i, r := range runs {
		if !slices.Contains(fresh, r.ID) || r.Verdict == sequences.StationFault {
			continue
		}
		fSerial, fAt, fLog, fLocal = append(fSerial, r.Serial), append(fAt, at[i]), append(fLog, x.log), append(fLocal, r.ID)
		fSt, fVa, fFx = append(fSt, deref(station[i])), append(fVa, deref(variant[i])), append(fFx, deref(fix[i]))
		fLot, fSite, fVerdict = append(fLot, r.Lot), append(fSite, site[i]), append(fVerdict, string(r.Verdict))
	}
	if len(fSerial) > 0 {
		if _, err := tx.Exec(ctx, `SELECT plant_note_first($1, $2, $3, $4, $5, $6, $7, $8, $9, $10)`,
			fSerial, fAt, fLog, fLocal, fSt, fVa, fFx, fLot, fSite, fVerdict); err != nil {
			return 0, 0, err
		}
	}
	var (
		mLocal, mFin         []int64
		mSeq, mStation, mQty []int32
		mVal, mLow, mHigh    []*float64
		mVerdict             []string
	)
	for _, id := range fresh {
		r := byID[id]
		for i, m := range r.Measurements {
			mLocal = append(mLocal, id)
			mFin = append(mFin, r.Finished.UnixNano())
			mSeq = append(mSeq, int32(i))
			s := idOrNil(x.stations, r.Station)
			var sv int32
			if s != nil {
				sv = *s
			}
			mStation = append(mStation, sv)
			mQty = append(mQty, x.quantities[[3]string{string(m.Step), string(m.Name), m.Unit}])
			mVal, mLow, mHigh = append(mVal, nullF(m.Value)), append(mLow, nullF(m.Low)), append(mHigh, nullF(m.High))
			mVerdict = append(mVerdict, string(m.Verdict))
		}
	}
	if len(mLocal) > 0 && len(mLocal) <= 4*smallBatch {
		if _, err := tx.Exec(ctx, `INSERT INTO measurements (log_id, local_id, finished, seq, station_id, quantity_id, value, low, high, verdict)
			SELECT $1, * FROM unnest($2::bigint[], $3::bigint[], $4::int[], $5::int[], $6::int[], $7::float8[], $8::float8[], $9::float8[], $10::text[])`,
			x.log, mLocal, mFin, mSeq, mStation, mQty, mVal, mLow, mHigh, mVerdict); err != nil {
			return 0, 0, err
		}
	} else if len(mLocal) > 0 {
		// COPY into a temporary table, then one INSERT: COPY is the fast
		// way in, and the INSERT applies the row-level policies, which
		// COPY into the table itself does not support. The runs are new in
		// this transaction, so none of their measurements is stored yet.
		if _, err := tx.Exec(ctx, `CREATE TEMP TABLE IF NOT EXISTS measurements_in (
			log_id int, local_id bigint, finished bigint, seq int, station_id int, quantity_id int,
			value float8, low float8, high float8, verdict text) ON COMMIT DELETE ROWS`); err != nil {
			return 0, 0, err
		}
		rows := make([][]any, len(mLocal))
		for i := range mLocal {
			rows[i] = []any{x.log, mLocal[i], mFin[i], mSeq[i], mStation[i], mQty[i], mVal[i], mLow[i], mHigh[i], mVerdict[i]}
		}
		cols := []string{"log_id", "local_id", "finished", "seq", "station_id", "quantity_id", "value", "low", "high", "verdict"}
		if _, err := tx.CopyFrom(ctx, pgx.Identifier{"measurements_in"}, cols, pgx.CopyFromRows(rows)); err != nil {
			return 0, 0, err
		}
		if _, err := tx.Exec(ctx, `INSERT INTO measurements SELECT * FROM measurements_in; TRUNCATE measurements_in`); err != nil {
			return 0, 0, err
		}
	}
	return len(fresh), n - len(fresh), nil
}

// putTrust inserts station checks and studies.
func (db *DB) putTrust(ctx context.Context, tx pgx.Tx, b *Batch, checks []store.StationCheck, studies []store.Study, x *ids) (landed, dup int, err error) {
	for _, c := range checks {
		tag, err := tx.Exec(ctx, `INSERT INTO station_checks (log_id, local_id, station_id, fixture_id, time, received,
			station_hash, ok, last_run_id, details) VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10) ON CONFLICT DO NOTHING`,
			x.log, c.ID, idOrNil(x.stations, c.Station), idOrNil(x.fixtures, c.Fixture), c.Time.UnixNano()+x.offset, x.now,
			c.StationHash, c.OK, c.LastRunID, string(c.Details))
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
		tag, err := tx.Exec(ctx, `INSERT INTO studies (log_id, local_id, station_id, fixture_id, kind, time, received, results)
			VALUES ($1, $2, $3, $4, $5, $6, $7, $8) ON CONFLICT DO NOTHING`,
			x.log, s.ID, idOrNil(x.stations, s.Station), idOrNil(x.fixtures, s.Fixture), s.Kind, s.Time.UnixNano()+x.offset, x.now, string(s.Results))
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

// putRelays stores the station's latest relay counts in one statement.
func (db *DB) putRelays(ctx context.Context, tx pgx.Tx, b *Batch, x *ids) error {
	if len(b.Relays) == 0 {
		return nil
	}
	fix, rung, count := make([]int32, len(b.Relays)), make([]int32, len(b.Relays)), make([]int64, len(b.Relays))
	for i, r := range b.Relays {
		if r.Count > math.MaxInt64 {
			return fmt.Errorf("relay count of %s rung %d too large", r.Fixture, r.Rung)
		}
		fix[i], rung[i], count[i] = x.fixtures[r.Fixture], int32(r.Rung), int64(r.Count)
	}
	if _, err := tx.Exec(ctx, `INSERT INTO relay_wear (station_id, fixture_id, rung, count, updated)
		SELECT $1, f, r, c, $2 FROM unnest($3::int[], $4::int[], $5::bigint[]) AS u(f, r, c)
		ON CONFLICT (station_id, fixture_id, rung) DO UPDATE SET count = EXCLUDED.count, updated = EXCLUDED.updated`,
		x.station, x.now, fix, rung, count); err != nil {
		return fmt.Errorf("relay wear: %w", err)
	}
	return nil
}

// smallBatch is the most rows written with one INSERT from arrays; larger
// batches go through COPY into a temporary table, which is faster per row
// but costs more round trips.
const smallBatch = 64

// copyRuns inserts many runs through COPY into a temporary table and one
// INSERT … ON CONFLICT DO NOTHING (which applies the row-level policies and
// skips runs the plant already has); it returns the new runs' local ids.
func (db *DB) copyRuns(ctx context.Context, tx pgx.Tx, x *ids, local []int64, station []*int32, serial []string,
	variant, cfg, fix []*int32, op, lot, sw []string, started []*int64, finished, at []int64,
	verdict, code []string, trip []*float64, driver, fault, site []string) (pgx.Rows, error) {
	n := len(local)
	if _, err := tx.Exec(ctx, `CREATE TEMP TABLE IF NOT EXISTS runs_in (
		local_id bigint, station_id int, serial text, variant_id int, config_id int, fixture_id int,
		operator text, lot text, software text, started bigint, finished bigint, at bigint,
		verdict text, fail_code text, trip_pf float8, driver text, fault text, site text) ON COMMIT DELETE ROWS`); err != nil {
		return nil, err
	}
	in := make([][]any, n)
	for i := range n {
		in[i] = []any{local[i], station[i], serial[i], variant[i], cfg[i], fix[i], op[i], lot[i], sw[i],
			started[i], finished[i], at[i], verdict[i], code[i], trip[i], driver[i], fault[i], site[i]}
	}
	if _, err := tx.CopyFrom(ctx, pgx.Identifier{"runs_in"}, []string{"local_id", "station_id", "serial", "variant_id",
		"config_id", "fixture_id", "operator", "lot", "software", "started", "finished", "at", "verdict", "fail_code", "trip_pf",
		"driver", "fault", "site"},
		pgx.CopyFromRows(in)); err != nil {
		return nil, err
	}
	return tx.Query(ctx, `WITH ins AS (INSERT INTO runs (log_id, local_id, station_id, serial, variant_id, config_id, fixture_id,
		operator, lot, software, started, finished, at, received, verdict, fail_code, trip_pf, driver, fault, site)
		SELECT $1, local_id, station_id, serial, variant_id, config_id, fixture_id, operator, lot, software,
			started, finished, at, $2, verdict, fail_code, trip_pf, driver, fault, site FROM runs_in
		ON CONFLICT DO NOTHING RETURNING local_id)
		SELECT local_id FROM ins`, x.log, x.now)
}
