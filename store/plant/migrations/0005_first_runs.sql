-- 0005: serial_first keeps, beside each serial's first unit verdict, the
-- columns that select runs (station, variant, fixture, lot, site, verdict,
-- time), so first-pass yield over any filter is counted from this table
-- alone, through its own index, instead of one lookup per run.
DROP FUNCTION plant_note_first(text[], bigint[], int[], bigint[]);
DROP TABLE serial_first;
CREATE TABLE serial_first (
	serial     text   PRIMARY KEY,
	at         bigint NOT NULL,
	log_id     int    NOT NULL,
	local_id   bigint NOT NULL,
	station_id int    NOT NULL,
	variant_id int    NOT NULL,
	fixture_id int    NOT NULL,
	lot        text   NOT NULL,
	site       text   NOT NULL,
	verdict    text   NOT NULL
);
INSERT INTO serial_first
SELECT DISTINCT ON (serial) serial, at, log_id, local_id, station_id, variant_id, fixture_id, lot, site, verdict
FROM runs WHERE verdict <> 'station-fault' ORDER BY serial, at, log_id, local_id;
CREATE INDEX serial_first_variant_at ON serial_first (variant_id, at) INCLUDE (station_id, fixture_id, lot, site, verdict);
DO $$
DECLARE r text;
BEGIN
	FOR r IN SELECT db_role FROM stations WHERE db_role IS NOT NULL LOOP
		EXECUTE format('GRANT SELECT ON serial_first TO %I', r);
	END LOOP;
END $$;

-- plant_note_first records newly stored runs (not station faults) as their
-- serials' first when they are earlier than what is kept. It runs with its
-- owner's rights: a station role may call it without the right to write
-- the table directly. Serials are locked in sorted order, so two stations
-- noting the same serials cannot deadlock.
CREATE FUNCTION plant_note_first(s text[], a bigint[], l int[], i bigint[], st int[], va int[], fx int[],
	lo text[], si text[], ve text[]) RETURNS void LANGUAGE sql
	SECURITY DEFINER SET search_path FROM CURRENT AS $$
INSERT INTO serial_first AS f (serial, at, log_id, local_id, station_id, variant_id, fixture_id, lot, site, verdict)
SELECT DISTINCT ON (u.s) u.s, u.a, u.l, u.i, u.st, u.va, u.fx, u.lo, u.si, u.ve
FROM unnest(s, a, l, i, st, va, fx, lo, si, ve) AS u(s, a, l, i, st, va, fx, lo, si, ve)
ORDER BY u.s, u.a, u.l, u.i
ON CONFLICT (serial) DO UPDATE SET at = EXCLUDED.at, log_id = EXCLUDED.log_id, local_id = EXCLUDED.local_id,
	station_id = EXCLUDED.station_id, variant_id = EXCLUDED.variant_id, fixture_id = EXCLUDED.fixture_id,
	lot = EXCLUDED.lot, site = EXCLUDED.site, verdict = EXCLUDED.verdict
WHERE (EXCLUDED.at, EXCLUDED.log_id, EXCLUDED.local_id) < (f.at, f.log_id, f.local_id)
$$;
