package plant

import (
	"context"
	"embed"
	"errors"
	"fmt"
	"io/fs"
	"path"
	"sort"
	"strings"
	"sync"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/pgx/v5/pgxpool"
)

// Sentinel errors of the plant store.
var (
	// ErrSchemaTooNew: the database was migrated by a newer padline.
	ErrSchemaTooNew = errors.New("plant: plant schema newer than this program")
	// ErrUnknownStation: the station is not registered in the plant store.
	ErrUnknownStation = errors.New("plant: station not registered")
	// ErrNotFound: a looked-up item is not in the plant store.
	ErrNotFound = errors.New("plant: not found")
)

//go:embed migrations/*.sql
var migrationFS embed.FS

type migration struct {
	name string
	sql  string
}

func migrations() ([]migration, error) {
	names, err := fs.Glob(migrationFS, "migrations/*.sql")
	if err != nil {
		return nil, err
	}
	sort.Strings(names)
	out := make([]migration, 0, len(names))
	for _, n := range names {
		b, err := migrationFS.ReadFile(n)
		if err != nil {
			return nil, err
		}
		out = append(out, migration{name: path.Base(n), sql: string(b)})
	}
	return out, nil
}

// SchemaVersion is the plant schema version this program writes.
func SchemaVersion() int {
	m, _ := migrations()
	return len(m)
}

// DB is an open plant store. It is safe for concurrent use.
type DB struct {
	pool *pgxpool.Pool
	url  string

	mu     sync.Mutex
	months map[int64]bool      // month partitions known to exist (by first ns)
	known  map[string]int32    // committed ids of names, keyed by kind and name
	logs   map[string]knownLog // shift logs by uuid, as last committed
}

// cached returns the committed id of key.
func (db *DB) cached(key string) (int32, bool) {
	db.mu.Lock()
	defer db.mu.Unlock()
	id, ok := db.known[key]
	return id, ok
}

// remember keeps ids that a committed transaction resolved.
func (db *DB) remember(m map[string]int32) {
	db.mu.Lock()
	defer db.mu.Unlock()
	if db.known == nil {
		db.known = map[string]int32{}
	}
	for k, v := range m {
		db.known[k] = v
	}
}

// Open connects to the plant store at url (a postgres:// URL; a
// search_path parameter selects the schema). It does not migrate: call
// Migrate as the schema owner.
func Open(ctx context.Context, url string) (*DB, error) {
	return open(ctx, url, false)
}

// open is Open; forReads sets the session up for the read side's queries
// (readParams).
func open(ctx context.Context, url string, forReads bool) (*DB, error) {
	cfg, err := pgxpool.ParseConfig(url)
	if err != nil {
		return nil, fmt.Errorf("open plant store: %w", err)
	}
	if forReads {
		readParams(cfg)
	} else if cfg.ShouldPing == nil {
		// pgxpool pings a connection idle over 1 s before handing it out:
		// a round trip and a goroutine on every batch of a line slower than
		// a unit a second. A forwarder sends at least every Heartbeat, so
		// this pings only after a pause; a connection the server dropped
		// meanwhile fails its batch, which is retried after the back-off
		// (under 1 s) on a new one.
		cfg.ShouldPing = func(_ context.Context, p pgxpool.ShouldPingParams) bool { return p.IdleDuration > 2*Heartbeat }
	}
	pool, err := pgxpool.NewWithConfig(ctx, cfg)
	if err != nil {
		return nil, fmt.Errorf("open plant store %s: %w", Redact(url), err)
	}
	return &DB{pool: pool, url: url, months: map[int64]bool{}}, nil
}

// readParams sets the session parameters of connections that run the read
// side's queries (history, drift, the line board), where the URL does not
// set them: JIT compilation off. Those queries are index scans with a
// comparison or two per row, which compiled code does not speed up, and
// PostgreSQL compiles every plan estimated above jit_above_cost: drift's
// series of one variant on 10,000,000 runs (987,145 points) cost its
// backend 2.00 s of CPU with JIT and 1.55 s without (EXPLAIN ANALYZE: JIT
// 129 ms of compiling alone).
func readParams(cfg *pgxpool.Config) {
	if _, ok := cfg.ConnConfig.RuntimeParams["jit"]; !ok {
		cfg.ConnConfig.RuntimeParams["jit"] = "off"
	}
}

// Redact returns url without its password, for messages.
func Redact(url string) string {
	cfg, err := pgconn.ParseConfig(url)
	if err != nil || cfg.Password == "" {
		return url
	}
	return strings.ReplaceAll(url, cfg.Password, "xxxxx")
}

// Close closes every connection.
func (db *DB) Close() { db.pool.Close() }

// Ping checks that the server answers.
func (db *DB) Ping(ctx context.Context) error { return db.pool.Ping(ctx) }

// Migrate brings the schema up to date, one migration per transaction,
// under an advisory lock so concurrent callers apply each once.
func (db *DB) Migrate(ctx context.Context) error {
	all, err := migrations()
	if err != nil {
		return fmt.Errorf("read plant migrations: %w", err)
	}
	conn, err := db.pool.Acquire(ctx)
	if err != nil {
		return fmt.Errorf("migrate plant store: %w", err)
	}
	defer conn.Release()
	if _, err := conn.Exec(ctx, `SELECT pg_advisory_lock(hashtext(current_schema() || '.plant_schema'))`); err != nil {
		return fmt.Errorf("migrate plant store: %w", err)
	}
	defer conn.Exec(context.Background(), `SELECT pg_advisory_unlock(hashtext(current_schema() || '.plant_schema'))`)
	if _, err := conn.Exec(ctx, `CREATE TABLE IF NOT EXISTS plant_schema (version int NOT NULL)`); err != nil {
		var pe *pgconn.PgError
		if errors.As(err, &pe) && pe.Code == "3F000" {
			return fmt.Errorf("migrate plant store: the schema named by search_path does not exist (CREATE SCHEMA it first): %w", err)
		}
		return fmt.Errorf("migrate plant store: %w", err)
	}
	var v int
	err = conn.QueryRow(ctx, `SELECT version FROM plant_schema`).Scan(&v)
	if errors.Is(err, pgx.ErrNoRows) {
		if _, err = conn.Exec(ctx, `INSERT INTO plant_schema VALUES (0)`); err != nil {
			return fmt.Errorf("migrate plant store: %w", err)
		}
	} else if err != nil {
		return fmt.Errorf("migrate plant store: %w", err)
	}
	if v > len(all) {
		return fmt.Errorf("%w: database at version %d, this padline knows up to %d: use the padline that migrated it, or a newer one", ErrSchemaTooNew, v, len(all))
	}
	for i := v; i < len(all); i++ {
		m := all[i]
		err := pgx.BeginFunc(ctx, conn, func(tx pgx.Tx) error {
			if _, err := tx.Exec(ctx, m.sql); err != nil {
				return err
			}
			_, err := tx.Exec(ctx, `UPDATE plant_schema SET version = $1`, i+1)
			return err
		})
		if err != nil {
			return fmt.Errorf("plant migration %s: %w", m.name, err)
		}
	}
	return nil
}

// Version returns the schema version of the database (0: not migrated).
func (db *DB) Version(ctx context.Context) (int, error) {
	var v int
	err := db.pool.QueryRow(ctx, `SELECT version FROM plant_schema`).Scan(&v)
	var pe *pgconn.PgError
	if errors.As(err, &pe) && pe.Code == "42P01" {
		return 0, nil
	}
	return v, err
}

// Describe names the plant store and its schema version for a command's
// last line, and says when the schema is older than this program and how
// to bring it up to date.
func (db *DB) Describe(ctx context.Context) string {
	v, err := db.Version(ctx)
	switch {
	case err != nil:
		return fmt.Sprintf("plant store %s, schema version unknown: %v", Redact(db.url), Hint(err))
	case v < SchemaVersion():
		return fmt.Sprintf("plant store %s, schema version %d; this padline knows %d: run 'padline plant init' as the plant's owner", Redact(db.url), v, SchemaVersion())
	}
	return fmt.Sprintf("plant store %s, schema version %d", Redact(db.url), v)
}

// Station is a station registered in the plant store.
type Station struct {
	Name string
	Line string
	// Role is the PostgreSQL role the station logs in as ("": none; then
	// only the owner can write its rows).
	Role string
}

// AddStation registers a station (or updates its line and role) and, when
// s.Role is set, creates that login role if it does not exist and grants it
// what forwarding needs. Run it as the schema owner.
func (db *DB) AddStation(ctx context.Context, s Station) error {
	if s.Name == "" {
		return errors.New("add station: empty name")
	}
	var role any
	if s.Role != "" {
		role = s.Role
	}
	return pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		if _, err := tx.Exec(ctx, `INSERT INTO stations (name, line, db_role) VALUES ($1, $2, $3)
			ON CONFLICT (name) DO UPDATE SET line = EXCLUDED.line, db_role = EXCLUDED.db_role`, s.Name, s.Line, role); err != nil {
			return fmt.Errorf("add station %s: %w", s.Name, err)
		}
		if s.Role == "" {
			return nil
		}
		r := pgx.Identifier{s.Role}.Sanitize()
		var exists bool
		if err := tx.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM pg_roles WHERE rolname = $1)`, s.Role).Scan(&exists); err != nil {
			return fmt.Errorf("add station %s: %w", s.Name, err)
		}
		var schema string
		if err := tx.QueryRow(ctx, `SELECT current_schema()`).Scan(&schema); err != nil {
			return fmt.Errorf("add station %s: %w", s.Name, err)
		}
		sc := pgx.Identifier{schema}.Sanitize()
		stmts := []string{
			"GRANT USAGE ON SCHEMA " + sc + " TO " + r,
			"GRANT SELECT ON plant_schema, stations, variants, fixtures, quantities, configs, serial_first TO " + r,
			"GRANT INSERT ON variants, fixtures, quantities, configs TO " + r,
			"GRANT SELECT, INSERT, UPDATE ON logs, relay_wear TO " + r,
			"GRANT SELECT, INSERT ON runs, measurements, station_checks, studies TO " + r,
			"GRANT USAGE ON ALL SEQUENCES IN SCHEMA " + sc + " TO " + r,
			"GRANT EXECUTE ON FUNCTION plant_ensure_month(bigint), plant_my_station(), " + noteFirst + " TO " + r,
		}
		if !exists {
			stmts = append([]string{"CREATE ROLE " + r + " LOGIN"}, stmts...)
		}
		for _, q := range stmts {
			if _, err := tx.Exec(ctx, q); err != nil {
				return fmt.Errorf("add station %s: role %s: %w", s.Name, s.Role, err)
			}
		}
		return nil
	})
}

// Stations returns the registered stations by name.
func (db *DB) Stations(ctx context.Context) ([]Station, error) {
	rows, err := db.pool.Query(ctx, `SELECT name, line, coalesce(db_role, '') FROM stations ORDER BY name`)
	if err != nil {
		return nil, fmt.Errorf("stations: %w", err)
	}
	return pgx.CollectRows(rows, func(r pgx.CollectableRow) (Station, error) {
		var s Station
		err := r.Scan(&s.Name, &s.Line, &s.Role)
		return s, err
	})
}

// noteFirst is plant_note_first's signature, for GRANT.
const noteFirst = "plant_note_first(text[], bigint[], int[], bigint[], int[], int[], int[], text[], text[], text[])"

// rlsTables are the tables under row-level security (migration 0001).
var rlsTables = []string{"logs", "runs", "measurements", "station_checks", "studies", "relay_wear"}

// AddReader creates (if missing) a login role that may read every plant
// table and write none — the line board's role — and lets it past the
// row-level policies for reading. Run it as the schema owner. The role's
// sessions are read-only by default as well (default_transaction_read_only).
func (db *DB) AddReader(ctx context.Context, role string) error {
	if role == "" {
		return errors.New("add reader: empty role name")
	}
	r := pgx.Identifier{role}.Sanitize()
	return pgx.BeginFunc(ctx, db.pool, func(tx pgx.Tx) error {
		var exists bool
		var schema string
		if err := tx.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM pg_roles WHERE rolname = $1), current_schema()`, role).Scan(&exists, &schema); err != nil {
			return fmt.Errorf("add reader %s: %w", role, err)
		}
		sc := pgx.Identifier{schema}.Sanitize()
		var stmts []string
		if !exists {
			stmts = append(stmts, "CREATE ROLE "+r+" LOGIN")
		}
		stmts = append(stmts, "ALTER ROLE "+r+" SET default_transaction_read_only = on",
			"GRANT USAGE ON SCHEMA "+sc+" TO "+r,
			"GRANT SELECT ON ALL TABLES IN SCHEMA "+sc+" TO "+r,
			"GRANT EXECUTE ON FUNCTION plant_my_station() TO "+r)
		for _, t := range rlsTables {
			p := pgx.Identifier{"reader_" + role}.Sanitize()
			stmts = append(stmts, "DROP POLICY IF EXISTS "+p+" ON "+t,
				"CREATE POLICY "+p+" ON "+t+" FOR SELECT TO "+r+" USING (true)")
		}
		for _, q := range stmts {
			if _, err := tx.Exec(ctx, q); err != nil {
				return fmt.Errorf("add reader %s: %w", role, err)
			}
		}
		return nil
	})
}

// OpenReader opens the plant store at url for reading only: every
// transaction is read-only, and the role it logs in as must be one that
// cannot write any plant table (see AddReader), or it is refused.
func OpenReader(ctx context.Context, url string) (*DB, error) {
	cfg, err := pgxpool.ParseConfig(url)
	if err != nil {
		return nil, fmt.Errorf("open plant store: %w", err)
	}
	cfg.ConnConfig.RuntimeParams["default_transaction_read_only"] = "on"
	readParams(cfg)
	pool, err := pgxpool.NewWithConfig(ctx, cfg)
	if err != nil {
		return nil, fmt.Errorf("open plant store %s: %w", Redact(url), err)
	}
	p := &DB{pool: pool, url: url, months: map[int64]bool{}}
	var user string
	var writes bool
	err = pool.QueryRow(ctx, `SELECT current_user, EXISTS (SELECT 1 FROM pg_tables WHERE schemaname = current_schema()
		AND has_table_privilege(format('%I.%I', schemaname, tablename), 'INSERT, UPDATE, DELETE, TRUNCATE'))`).Scan(&user, &writes)
	if err == nil && writes {
		err = fmt.Errorf("role %s may write the plant tables: connect as a read-only role ('padline plant add-reader ROLE')", user)
	}
	var v int
	if err == nil {
		v, err = p.Version(ctx)
	}
	if err == nil && v == 0 {
		err = errors.New("no plant schema here (run 'padline plant init --db URL' as the plant's owner, then 'padline plant add-reader ROLE')")
	}
	if err == nil {
		err = readable(v)
	}
	if err != nil {
		pool.Close()
		return nil, fmt.Errorf("plant store %s: %w", Redact(url), err)
	}
	return p, nil
}
