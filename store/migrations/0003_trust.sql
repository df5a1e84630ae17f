-- 0003: station trust. Shift-start reference checks (the gate in front of
-- production units), measurement-system studies, and the station's GUM
-- uncertainty. Times are integer nanoseconds since the Unix epoch, UTC;
-- details, results and components are JSON text written by padline.

-- One row per 'padline station check': ok = 1 when every reference unit and
-- the ladder self-test passed, 0 when the station was refused. last_run_id
-- is the highest run id in the log at check time (0 for none), so the gate
-- can count the runs since; station_hash is the sha256 of the station file
-- the check ran under.
CREATE TABLE station_checks (
	id           INTEGER PRIMARY KEY,
	time         INTEGER NOT NULL,
	station_id   INTEGER NOT NULL REFERENCES stations(id),
	fixture_id   INTEGER NOT NULL REFERENCES fixtures(id),
	station_hash TEXT    NOT NULL,
	ok           INTEGER NOT NULL CHECK (ok IN (0, 1)),
	last_run_id  INTEGER NOT NULL CHECK (last_run_id >= 0),
	details      TEXT    NOT NULL
);

CREATE INDEX station_checks_latest ON station_checks (station_id, fixture_id, time);

-- One row per study: kind 'type1' or 'grr'.
CREATE TABLE studies (
	id         INTEGER PRIMARY KEY,
	kind       TEXT    NOT NULL CHECK (kind IN ('type1', 'grr')),
	time       INTEGER NOT NULL,
	station_id INTEGER NOT NULL REFERENCES stations(id),
	fixture_id INTEGER NOT NULL REFERENCES fixtures(id),
	results    TEXT    NOT NULL
);

CREATE INDEX studies_latest ON studies (station_id, fixture_id, kind, time);

-- The station's expanded uncertainty U (k = 2) and combined standard
-- uncertainty u_c, in pF, with the components they came from and a line
-- saying where the inputs came from.
CREATE TABLE station_uncertainty (
	id         INTEGER PRIMARY KEY,
	time       INTEGER NOT NULL,
	station_id INTEGER NOT NULL REFERENCES stations(id),
	fixture_id INTEGER NOT NULL REFERENCES fixtures(id),
	u_pf       REAL    NOT NULL CHECK (u_pf >= 0),
	uc_pf      REAL    NOT NULL CHECK (uc_pf >= 0),
	components TEXT    NOT NULL,
	source     TEXT    NOT NULL
);

CREATE INDEX station_uncertainty_latest ON station_uncertainty (station_id, fixture_id, time);
