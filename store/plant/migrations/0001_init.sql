-- 0001: the plant store's first schema. Times are integer nanoseconds since
-- the Unix epoch, UTC, as in the station's shift log, so a plant query gives
-- the very numbers the station's own log gives. Three times are kept per
-- run: finished (the station's clock), received (this server's clock when
-- the run arrived) and at (finished corrected by the station's measured
-- clock offset): at orders runs across stations and assigns shifts.

-- A station that forwards. db_role is the PostgreSQL role it logs in as:
-- row-level security lets that role write rows of this station only.
CREATE TABLE stations (
	id      serial PRIMARY KEY,
	name    text NOT NULL UNIQUE CHECK (name <> ''),
	line    text NOT NULL DEFAULT '',
	db_role text UNIQUE
);

-- One row per station shift log (a SQLite file, named by the uuid it keeps).
-- A run is identified across the plant by (log_id, local_id): its shift
-- log and its id in that log.
CREATE TABLE logs (
	id              serial PRIMARY KEY,
	uuid            uuid   NOT NULL UNIQUE,
	station_id      int    NOT NULL REFERENCES stations(id),
	clock_offset_ns bigint NOT NULL DEFAULT 0,
	last_local_id   bigint NOT NULL DEFAULT 0,
	backlog         bigint NOT NULL DEFAULT 0,
	reported        bigint NOT NULL DEFAULT 0,
	profile         jsonb  NOT NULL DEFAULT '{}'
);

CREATE TABLE variants (
	id   serial PRIMARY KEY,
	name text NOT NULL UNIQUE
);

CREATE TABLE fixtures (
	id   serial PRIMARY KEY,
	name text NOT NULL UNIQUE
);

CREATE TABLE quantities (
	id   serial PRIMARY KEY,
	step text NOT NULL,
	name text NOT NULL,
	unit text NOT NULL,
	UNIQUE (step, name, unit)
);

-- The exact bytes of each variant configuration a run was judged under.
CREATE TABLE configs (
	id         serial PRIMARY KEY,
	variant_id int    NOT NULL REFERENCES variants(id),
	hash       text   NOT NULL,
	snapshot   bytea  NOT NULL,
	first_seen bigint NOT NULL,
	UNIQUE (variant_id, hash)
);

CREATE TABLE runs (
	log_id     int    NOT NULL,
	local_id   bigint NOT NULL,
	station_id int    NOT NULL,
	serial     text   NOT NULL CHECK (serial <> ''),
	variant_id int    NOT NULL,
	config_id  int    NOT NULL,
	fixture_id int    NOT NULL,
	operator   text   NOT NULL,
	lot        text   NOT NULL,
	site       text   NOT NULL DEFAULT '',
	software   text   NOT NULL,
	started    bigint,
	finished   bigint NOT NULL,
	at         bigint NOT NULL,
	received   bigint NOT NULL,
	verdict    text   NOT NULL CHECK (verdict IN ('pass', 'fail', 'station-fault')),
	fail_code  text   NOT NULL,
	trip_pf    float8 CHECK (trip_pf >= 0 AND trip_pf < 1e6),
	PRIMARY KEY (log_id, local_id, finished)
) PARTITION BY RANGE (finished);

CREATE INDEX runs_serial ON runs (serial, at);
CREATE INDEX runs_variant_at ON runs (variant_id, at) INCLUDE (trip_pf, verdict, station_id);
CREATE INDEX runs_station_at ON runs (station_id, at);
CREATE INDEX runs_at ON runs (at);

-- A measurement's limits must be ordered: a row with low > high is refused.
CREATE TABLE measurements (
	log_id      int    NOT NULL,
	local_id    bigint NOT NULL,
	finished    bigint NOT NULL,
	seq         int    NOT NULL,
	station_id  int    NOT NULL,
	quantity_id int    NOT NULL,
	value       float8,
	low         float8,
	high        float8,
	verdict     text   NOT NULL,
	PRIMARY KEY (log_id, local_id, finished, seq),
	CHECK (low IS NULL OR high IS NULL OR low <= high)
) PARTITION BY RANGE (finished);

CREATE TABLE station_checks (
	log_id       int     NOT NULL REFERENCES logs(id),
	local_id     bigint  NOT NULL,
	station_id   int     NOT NULL REFERENCES stations(id),
	fixture_id   int     NOT NULL REFERENCES fixtures(id),
	time         bigint  NOT NULL,
	received     bigint  NOT NULL,
	station_hash text    NOT NULL,
	ok           boolean NOT NULL,
	last_run_id  bigint  NOT NULL,
	details      jsonb   NOT NULL,
	PRIMARY KEY (log_id, local_id)
);
CREATE INDEX station_checks_latest ON station_checks (station_id, time);

CREATE TABLE studies (
	log_id     int    NOT NULL REFERENCES logs(id),
	local_id   bigint NOT NULL,
	station_id int    NOT NULL REFERENCES stations(id),
	fixture_id int    NOT NULL REFERENCES fixtures(id),
	kind       text   NOT NULL,
	time       bigint NOT NULL,
	received   bigint NOT NULL,
	results    jsonb  NOT NULL,
	PRIMARY KEY (log_id, local_id)
);

-- The latest relay operation count per station, fixture and rung.
CREATE TABLE relay_wear (
	station_id int    NOT NULL REFERENCES stations(id),
	fixture_id int    NOT NULL REFERENCES fixtures(id),
	rung       int    NOT NULL CHECK (rung >= 0),
	count      bigint NOT NULL CHECK (count >= 0),
	updated    bigint NOT NULL,
	PRIMARY KEY (station_id, fixture_id, rung)
);

-- The station whose role is logged in (NULL for any other role).
CREATE FUNCTION plant_my_station() RETURNS int LANGUAGE sql STABLE
	SET search_path FROM CURRENT
	AS $$ SELECT id FROM stations WHERE db_role = current_user $$;

-- Row-level security: a station role reads and writes its own station's
-- rows only. The owner (the plant administrator) is not bound by it.
ALTER TABLE logs ENABLE ROW LEVEL SECURITY;
ALTER TABLE runs ENABLE ROW LEVEL SECURITY;
ALTER TABLE measurements ENABLE ROW LEVEL SECURITY;
ALTER TABLE station_checks ENABLE ROW LEVEL SECURITY;
ALTER TABLE studies ENABLE ROW LEVEL SECURITY;
ALTER TABLE relay_wear ENABLE ROW LEVEL SECURITY;
CREATE POLICY own_station ON logs USING (station_id = plant_my_station());
CREATE POLICY own_station ON runs USING (station_id = plant_my_station());
CREATE POLICY own_station ON measurements USING (station_id = plant_my_station());
CREATE POLICY own_station ON station_checks USING (station_id = plant_my_station());
CREATE POLICY own_station ON studies USING (station_id = plant_my_station());
CREATE POLICY own_station ON relay_wear USING (station_id = plant_my_station());

-- plant_ensure_month creates the month partitions (UTC calendar months) of
-- runs and measurements that hold time ns. It runs with its owner's rights,
-- so a station role can call it without the right to create tables.
CREATE FUNCTION plant_ensure_month(ns bigint) RETURNS void LANGUAGE plpgsql
	SECURITY DEFINER SET search_path FROM CURRENT AS $$
DECLARE
	m  timestamp := date_trunc('month', to_timestamp(ns / 1e9) AT TIME ZONE 'UTC');
	lo bigint := (extract(epoch FROM m) * 1e9)::bigint;
	hi bigint := (extract(epoch FROM m + interval '1 month') * 1e9)::bigint;
	sfx text := to_char(m, '"y"YYYY"m"MM');
	t  text;
BEGIN
	PERFORM pg_advisory_xact_lock(hashtext(current_schema() || '.plant_ensure_month'));
	FOREACH t IN ARRAY ARRAY['runs', 'measurements'] LOOP
		IF to_regclass(format('%I.%I', current_schema(), t || '_' || sfx)) IS NULL THEN
			EXECUTE format('CREATE TABLE %I.%I PARTITION OF %I.%I FOR VALUES FROM (%s) TO (%s)',
				current_schema(), t || '_' || sfx, current_schema(), t, lo, hi);
		END IF;
	END LOOP;
END $$;
