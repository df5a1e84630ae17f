-- 0009: each serial's first unit verdict on each station it was tested on
-- (serial_first holds its first in the whole plant). A station's shift log
-- counts a serial's first-pass yield by its first verdict in that log, so a
-- unit failed on one station and retested on another is a first test on
-- both logs; the plant counts it so per station (drift --by station, the
-- line board) and once, on its first station, plant-wide
-- (DEVELOPERS.md "Plant-wide first-pass yield").
CREATE TABLE serial_station_first (
	serial     text   NOT NULL,
	station_id int    NOT NULL,
	at         bigint NOT NULL,
	log_id     int    NOT NULL,
	local_id   bigint NOT NULL,
	variant_id int    NOT NULL,
	fixture_id int    NOT NULL,
	lot        text   NOT NULL,
	site       text   NOT NULL,
	verdict    text   NOT NULL,
	PRIMARY KEY (serial, station_id)
);
INSERT INTO serial_station_first
SELECT DISTINCT ON (serial, station_id) serial, station_id, at, log_id, local_id, variant_id, fixture_id, lot, site, verdict
FROM runs WHERE verdict <> 'station-fault' ORDER BY serial, station_id, at, log_id, local_id;
CREATE INDEX serial_station_first_variant_at ON serial_station_first (variant_id, at)
	INCLUDE (station_id, fixture_id, lot, site, verdict);
CREATE INDEX serial_station_first_station_at ON serial_station_first (station_id, at) INCLUDE (verdict);

-- Whoever may read serial_first (station roles, readers) may read this.
DO $$
DECLARE r text;
BEGIN
	FOR r IN SELECT DISTINCT grantee FROM information_schema.role_table_grants
		WHERE table_schema = current_schema() AND table_name = 'serial_first' AND privilege_type = 'SELECT'
		AND grantee <> current_user LOOP
		EXECUTE format('GRANT SELECT ON serial_station_first TO %I', r);
	END LOOP;
END $$;

-- plant_note_first (same signature, so the write path and its grants are
-- unchanged) now keeps both tables: the serial's first in the plant and its
-- first on the run's station. Serials are locked in sorted order in each.
CREATE OR REPLACE FUNCTION plant_note_first(s text[], a bigint[], l int[], i bigint[], st int[], va int[], fx int[],
	lo text[], si text[], ve text[]) RETURNS void LANGUAGE sql
	SECURITY DEFINER SET search_path FROM CURRENT AS $$
INSERT INTO serial_first AS f (serial, at, log_id, local_id, station_id, variant_id, fixture_id, lot, site, verdict)
SELECT DISTINCT ON (u.s) u.s, u.a, u.l, u.i, u.st, u.va, u.fx, u.lo, u.si, u.ve
FROM unnest(s, a, l, i, st, va, fx, lo, si, ve) AS u(s, a, l, i, st, va, fx, lo, si, ve)
ORDER BY u.s, u.a, u.l, u.i
ON CONFLICT (serial) DO UPDATE SET at = EXCLUDED.at, log_id = EXCLUDED.log_id, local_id = EXCLUDED.local_id,
	station_id = EXCLUDED.station_id, variant_id = EXCLUDED.variant_id, fixture_id = EXCLUDED.fixture_id,
	lot = EXCLUDED.lot, site = EXCLUDED.site, verdict = EXCLUDED.verdict
WHERE (EXCLUDED.at, EXCLUDED.log_id, EXCLUDED.local_id) < (f.at, f.log_id, f.local_id);
INSERT INTO serial_station_first AS f (serial, station_id, at, log_id, local_id, variant_id, fixture_id, lot, site, verdict)
SELECT DISTINCT ON (u.s, u.st) u.s, u.st, u.a, u.l, u.i, u.va, u.fx, u.lo, u.si, u.ve
FROM unnest(s, a, l, i, st, va, fx, lo, si, ve) AS u(s, a, l, i, st, va, fx, lo, si, ve)
ORDER BY u.s, u.st, u.a, u.l, u.i
ON CONFLICT (serial, station_id) DO UPDATE SET at = EXCLUDED.at, log_id = EXCLUDED.log_id, local_id = EXCLUDED.local_id,
	variant_id = EXCLUDED.variant_id, fixture_id = EXCLUDED.fixture_id,
	lot = EXCLUDED.lot, site = EXCLUDED.site, verdict = EXCLUDED.verdict
WHERE (EXCLUDED.at, EXCLUDED.log_id, EXCLUDED.local_id) < (f.at, f.log_id, f.local_id);
$$;
