package store

import (
	"context"
	"crypto/sha256"
	"database/sql"
	"encoding/hex"
	"errors"
	"fmt"
	"iter"
	"math"
	"time"

	"padline/sequences"
)

var _ sequences.Recorder = (*DB)(nil)

// The retest policy finds PriorRuns on the recorder by type assertion.
var _ sequences.PriorRuns = (*DB)(nil)

// TripStep and TripName identify the measurement that holds a run's trip
// point; Record mirrors its value into the run for the drift series.
const (
	TripStep = sequences.StepTripSearch
	TripName = sequences.MeasTripPF
)

// HashConfig returns the hash the log keeps for a variant configuration:
// the hex-encoded SHA-256 of the exact bytes.
func HashConfig(snapshot []byte) string {
	sum := sha256.Sum256(snapshot)
	return hex.EncodeToString(sum[:])
}

// PutVariant registers the exact configuration bytes of variant name and
// returns their hash (HashConfig). It is idempotent: registering the same
// bytes again changes nothing; new bytes start a new entry in the variant's
// configuration history. Runs must name a registered (variant, hash) pair.
func (db *DB) PutVariant(ctx context.Context, name string, snapshot []byte) (string, error) {
	if name == "" {
		return "", fmt.Errorf("put variant: %w: empty name", ErrInvalidRun)
	}
	hash := HashConfig(snapshot)
	if snapshot == nil {
		snapshot = []byte{}
	}
	db.wmu.Lock()
	defer db.wmu.Unlock()
	tx, err := db.sql.BeginTx(ctx, nil)
	if err != nil {
		return "", fmt.Errorf("put variant %s: %w", name, err)
	}
	defer tx.Rollback()
	w := &writer{db: db, tx: tx, pending: map[string]int64{}}
	vid, err := w.intern(ctx, "variants", name)
	if err != nil {
		return "", fmt.Errorf("put variant %s: %w", name, err)
	}
	_, err = tx.ExecContext(ctx,
		`INSERT INTO configs (variant_id, hash, snapshot, first_seen) VALUES (?, ?, ?, ?)
		 ON CONFLICT (variant_id, hash) DO NOTHING`,
		vid, hash, snapshot, db.now().UnixNano())
	if err != nil {
		return "", fmt.Errorf("put variant %s: %w", name, err)
	}
	if err := tx.Commit(); err != nil {
		return "", fmt.Errorf("put variant %s: %w", name, err)
	}
	db.ids.merge(w.pending)
	return hash, nil
}

// NotSavedError reports that a run was not committed: nothing of it is in
// the log. errors.Is(err, ErrNotSaved) holds for it; errors.Is(err,
// ErrDiskFull) tells a full disk from other causes.
type NotSavedError struct {
	Serial string
	Err    error
}

// Error implements error.
func (e *NotSavedError) Error() string {
	return fmt.Sprintf("run of %s not saved: %v", e.Serial, e.Err)
}

// Unwrap returns the cause.
func (e *NotSavedError) Unwrap() error { return e.Err }

// Is makes errors.Is(err, ErrNotSaved) true.
func (e *NotSavedError) Is(target error) bool { return target == ErrNotSaved }

func notSaved(serial string, err error) error {
	return &NotSavedError{Serial: serial, Err: markFull(err)}
}

// Record commits r and all its measurements in one transaction and returns
// the run's id. It returns only after the commit; on any error the
// transaction is rolled back and the error is a *NotSavedError.
func (db *DB) Record(ctx context.Context, r *sequences.Run) (int64, error) {
	if r == nil {
		return 0, notSaved("", fmt.Errorf("%w: nil run", ErrInvalidRun))
	}
	if err := validate(r); err != nil {
		return 0, notSaved(r.Serial, err)
	}
	db.wmu.Lock()
	defer db.wmu.Unlock()
	tx, err := db.sql.BeginTx(ctx, nil)
	if err != nil {
		return 0, notSaved(r.Serial, err)
	}
	w := &writer{db: db, tx: tx, pending: map[string]int64{}}
	id, err := w.put(ctx, r)
	w.close()
	if err != nil {
		tx.Rollback()
		return 0, notSaved(r.Serial, err)
	}
	// A landed batch's outbox cursor rides this commit (DeferAdvance). If
	// its UPDATE fails, it stays pending and the run is committed without
	// it: SQLite undoes only the failed statement where it can (sqlite.org,
	// "Response To Errors Within A Transaction"); where it rolled the whole
	// transaction back (a full disk, an I/O error), the commit fails and
	// the run is not saved, as with any failed commit.
	adv := db.takePending()
	if adv != nil && db.advanceIn(ctx, tx, *adv) != nil {
		db.donePending(false)
		adv = nil
	}
	err = tx.Commit()
	if adv != nil {
		db.donePending(err == nil)
	}
	if err != nil {
		return 0, notSaved(r.Serial, err)
	}
	db.noteRecord(db.now())
	db.ids.merge(w.pending)
	return id, nil
}

// Import writes many runs with prepared statements, perTx runs per
// transaction (perTx < 1 means 1000). It is the seeding and migration path;
// a station records with Record. It returns the number of runs committed;
// on error the current transaction is rolled back and earlier ones stay.
func (db *DB) Import(ctx context.Context, runs iter.Seq[*sequences.Run], perTx int) (int64, error) {
	if perTx < 1 {
		perTx = 1000
	}
	db.wmu.Lock()
	defer db.wmu.Unlock()
	var (
		done int64
		w    *writer
		n    int
	)
	commit := func() error {
		w.close()
		if err := w.tx.Commit(); err != nil {
			return err
		}
		db.ids.merge(w.pending)
		done += int64(n)
		w, n = nil, 0
		return nil
	}
	for r := range runs {
		if err := validate(r); err != nil {
			if w != nil {
				w.close()
				w.tx.Rollback()
			}
			return done, fmt.Errorf("import run %d: %w", done+int64(n)+1, err)
		}
		if w == nil {
			tx, err := db.sql.BeginTx(ctx, nil)
			if err != nil {
				return done, fmt.Errorf("import: %w", err)
			}
			w = &writer{db: db, tx: tx, pending: map[string]int64{}}
		}
		if _, err := w.put(ctx, r); err != nil {
			w.close()
			w.tx.Rollback()
			return done, fmt.Errorf("import run %d: %w", done+int64(n)+1, markFull(err))
		}
		n++
		if n == perTx {
			if err := commit(); err != nil {
				return done, fmt.Errorf("import: %w", err)
			}
		}
	}
	if w != nil {
		if err := commit(); err != nil {
			return done, fmt.Errorf("import: %w", err)
		}
	}
	return done, nil
}

func validate(r *sequences.Run) error {
	if r == nil {
		return fmt.Errorf("%w: nil run", ErrInvalidRun)
	}
	switch {
	case r.Serial == "":
		return fmt.Errorf("%w: empty serial", ErrInvalidRun)
	case r.Variant == "":
		return fmt.Errorf("%w: empty variant", ErrInvalidRun)
	case r.Finished.IsZero():
		return fmt.Errorf("%w: no finish time", ErrInvalidRun)
	case r.Panel != "" && r.Site < 1, r.Panel == "" && r.Site != 0:
		return fmt.Errorf("%w: panel %q site %d (a site is 1-based and needs its panel)", ErrInvalidRun, r.Panel, r.Site)
	}
	switch r.Verdict {
	case sequences.Pass, sequences.Fail, sequences.StationFault:
	default:
		return fmt.Errorf("%w: verdict %q", ErrInvalidRun, r.Verdict)
	}
	return nil
}

// writer holds one write transaction and its prepared statements.
type writer struct {
	db      *DB
	tx      *sql.Tx
	pending map[string]int64 // ids created or found in this transaction

	insRun, insPanelRun, insMeas *sql.Stmt
}

func (w *writer) close() {
	if w.insRun != nil {
		w.insRun.Close()
	}
	if w.insPanelRun != nil {
		w.insPanelRun.Close()
	}
	if w.insMeas != nil {
		w.insMeas.Close()
	}
}

// lookup returns a cached id (committed or from this transaction).
func (w *writer) lookup(key string) (int64, bool) {
	if id, ok := w.pending[key]; ok {
		return id, true
	}
	return w.db.ids.get(key)
}

// intern returns the id of name in a (id, name UNIQUE) table, inserting it.
func (w *writer) intern(ctx context.Context, table, name string) (int64, error) {
	key := table + "\x00" + name
	if id, ok := w.lookup(key); ok {
		return id, nil
	}
	var id int64
	err := w.tx.QueryRowContext(ctx, "SELECT id FROM "+table+" WHERE name = ?", name).Scan(&id)
	if errors.Is(err, sql.ErrNoRows) {
		var res sql.Result
		res, err = w.tx.ExecContext(ctx, "INSERT INTO "+table+" (name) VALUES (?)", name)
		if err == nil {
			id, err = res.LastInsertId()
		}
	}
	if err != nil {
		return 0, fmt.Errorf("%s %q: %w", table, name, err)
	}
	w.pending[key] = id
	return id, nil
}

// quantity returns the id of (step, name, unit), inserting it.
func (w *writer) quantity(ctx context.Context, step, name, unit string) (int64, error) {
	key := "quantities\x00" + step + "\x00" + name + "\x00" + unit
	if id, ok := w.lookup(key); ok {
		return id, nil
	}
	var id int64
	err := w.tx.QueryRowContext(ctx,
		"SELECT id FROM quantities WHERE step = ? AND name = ? AND unit = ?", step, name, unit).Scan(&id)
	if errors.Is(err, sql.ErrNoRows) {
		var res sql.Result
		res, err = w.tx.ExecContext(ctx,
			"INSERT INTO quantities (step, name, unit) VALUES (?, ?, ?)", step, name, unit)
		if err == nil {
			id, err = res.LastInsertId()
		}
	}
	if err != nil {
		return 0, fmt.Errorf("quantity %s/%s: %w", step, name, err)
	}
	w.pending[key] = id
	return id, nil
}

// config returns the ids of the registered configuration (variant, hash).
func (w *writer) config(ctx context.Context, variant, hash string) (vid, cid int64, err error) {
	key := "configs\x00" + variant + "\x00" + hash
	vkey := "variants\x00" + variant
	if c, ok := w.lookup(key); ok {
		if v, ok := w.lookup(vkey); ok {
			return v, c, nil
		}
	}
	err = w.tx.QueryRowContext(ctx,
		`SELECT v.id, c.id FROM variants v JOIN configs c ON c.variant_id = v.id
		 WHERE v.name = ? AND c.hash = ?`, variant, hash).Scan(&vid, &cid)
	if errors.Is(err, sql.ErrNoRows) {
		return 0, 0, fmt.Errorf("%w: variant %s hash %q (register it with PutVariant)",
			ErrUnknownConfig, variant, hash)
	}
	if err != nil {
		return 0, 0, fmt.Errorf("config of %s: %w", variant, err)
	}
	w.pending[key], w.pending[vkey] = cid, vid
	return vid, cid, nil
}

// put inserts r and its measurements in w's transaction.
func (w *writer) put(ctx context.Context, r *sequences.Run) (int64, error) {
	vid, cid, err := w.config(ctx, r.Variant, r.ConfigHash)
	if err != nil {
		return 0, err
	}
	sid, err := w.intern(ctx, "stations", r.Station)
	if err != nil {
		return 0, err
	}
	fid, err := w.intern(ctx, "fixtures", r.Fixture)
	if err != nil {
		return 0, err
	}
	trip := sql.NullFloat64{}
	for _, m := range r.Measurements {
		if m.Step == TripStep && m.Name == TripName && !math.IsNaN(m.Value) {
			trip = sql.NullFloat64{Float64: m.Value, Valid: true}
		}
	}
	args := []any{r.Serial, vid, cid, sid, fid, r.Operator, r.Lot,
		r.Software, nanos(r.Started), r.Finished.UnixNano(), string(r.Verdict), r.FailCode, trip}
	cols, marks := "", ""
	if w.db.runColumns {
		cols, marks = ", driver, fault", ", ?, ?"
		args = append(args, r.Driver, r.Fault)
	}
	// A unit tested alone leaves the panel columns out, so a shift log
	// still at an older schema version (before panels) takes its runs.
	ins := &w.insRun
	if r.Panel != "" {
		ins = &w.insPanelRun
		cols, marks = cols+", panel, site", marks+", ?, ?"
		args = append(args, panelOf(r), siteOf(r))
	}
	if *ins == nil {
		*ins, err = w.tx.PrepareContext(ctx,
			`INSERT INTO runs (serial, variant_id, config_id, station_id, fixture_id, operator, lot,
			 software, started, finished, verdict, fail_code, trip_pf`+cols+`)
			 VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?`+marks+`)`)
		if err != nil {
			return 0, fmt.Errorf("prepare run insert: %w", err)
		}
	}
	res, err := (*ins).ExecContext(ctx, args...)
	if err != nil {
		return 0, fmt.Errorf("insert run: %w", err)
	}
	id, err := res.LastInsertId()
	if err != nil {
		return 0, fmt.Errorf("insert run: %w", err)
	}
	if len(r.Measurements) > 0 && w.insMeas == nil {
		w.insMeas, err = w.tx.PrepareContext(ctx,
			`INSERT INTO measurements (run_id, seq, quantity_id, value, low, high, verdict)
			 VALUES (?, ?, ?, ?, ?, ?, ?)`)
		if err != nil {
			return 0, fmt.Errorf("prepare measurement insert: %w", err)
		}
	}
	for i, m := range r.Measurements {
		qid, err := w.quantity(ctx, string(m.Step), string(m.Name), m.Unit)
		if err != nil {
			return 0, err
		}
		if _, err := w.insMeas.ExecContext(ctx, id, i, qid, nullable(m.Value), nullable(m.Low),
			nullable(m.High), string(m.Verdict)); err != nil {
			return 0, fmt.Errorf("insert measurement %s/%s: %w", m.Step, m.Name, err)
		}
	}
	return id, nil
}

// nullable maps NaN to SQL NULL.
func nullable(v float64) sql.NullFloat64 {
	if math.IsNaN(v) {
		return sql.NullFloat64{}
	}
	return sql.NullFloat64{Float64: v, Valid: true}
}

// nanos maps the zero time to SQL NULL.
func nanos(t time.Time) sql.NullInt64 {
	if t.IsZero() {
		return sql.NullInt64{}
	}
	return sql.NullInt64{Int64: t.UnixNano(), Valid: true}
}
