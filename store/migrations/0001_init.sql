-- 0001: the shift log's first schema. Times are integer nanoseconds since the
-- Unix epoch, UTC. Names that repeat on every run (variant, station, fixture,
-- measurement quantity) are kept once in their own table and referenced by id.

CREATE TABLE variants (
	id   INTEGER PRIMARY KEY,
	name TEXT NOT NULL UNIQUE
);

-- One row per distinct configuration a variant has had: the exact bytes of the
-- variant file and their hex SHA-256. A run points at the row that judged it.
CREATE TABLE configs (
	id         INTEGER PRIMARY KEY,
	variant_id INTEGER NOT NULL REFERENCES variants(id),
	hash       TEXT    NOT NULL,
	snapshot   BLOB    NOT NULL,
	first_seen INTEGER NOT NULL,
	UNIQUE (variant_id, hash)
);

CREATE TABLE stations (
	id   INTEGER PRIMARY KEY,
	name TEXT NOT NULL UNIQUE
);

CREATE TABLE fixtures (
	id   INTEGER PRIMARY KEY,
	name TEXT NOT NULL UNIQUE
);

-- A measured quantity: the step that recorded it, its name and unit.
CREATE TABLE quantities (
	id   INTEGER PRIMARY KEY,
	step TEXT NOT NULL,
	name TEXT NOT NULL,
	unit TEXT NOT NULL,
	UNIQUE (step, name, unit)
);

-- trip_pf mirrors the value of the measurement trip_search/trip_pf (NULL when
-- the run has none) so the drift series reads one table.
CREATE TABLE runs (
	id         INTEGER PRIMARY KEY,
	serial     TEXT    NOT NULL,
	variant_id INTEGER NOT NULL REFERENCES variants(id),
	config_id  INTEGER NOT NULL REFERENCES configs(id),
	station_id INTEGER NOT NULL REFERENCES stations(id),
	fixture_id INTEGER NOT NULL REFERENCES fixtures(id),
	operator   TEXT    NOT NULL,
	lot        TEXT    NOT NULL,
	software   TEXT    NOT NULL,
	started    INTEGER,
	finished   INTEGER NOT NULL,
	verdict    TEXT    NOT NULL CHECK (verdict IN ('pass', 'fail', 'station-fault')),
	fail_code  TEXT    NOT NULL,
	trip_pf    REAL
);

CREATE INDEX runs_serial ON runs (serial, finished);
CREATE INDEX runs_variant_finished ON runs (variant_id, finished);
CREATE INDEX runs_finished ON runs (finished);

-- low and high are NULL where the side has no limit; value is NULL when NaN.
CREATE TABLE measurements (
	run_id      INTEGER NOT NULL REFERENCES runs(id),
	seq         INTEGER NOT NULL,
	quantity_id INTEGER NOT NULL REFERENCES quantities(id),
	value       REAL,
	low         REAL,
	high        REAL,
	verdict     TEXT    NOT NULL,
	PRIMARY KEY (run_id, seq)
) WITHOUT ROWID;
