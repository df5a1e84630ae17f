-- 0002: each serial's first unit verdict — its earliest run by plant time
-- (at, then shift log and id) that is not a station fault — kept as runs
-- arrive, in whatever order they arrive. First-pass yield then needs one
-- lookup per run instead of a search of every month's partition.
CREATE TABLE serial_first (
	serial   text   PRIMARY KEY,
	at       bigint NOT NULL,
	log_id   int    NOT NULL,
	local_id bigint NOT NULL
);

INSERT INTO serial_first
SELECT DISTINCT ON (serial) serial, at, log_id, local_id FROM runs
WHERE verdict <> 'station-fault' ORDER BY serial, at, log_id, local_id;

-- plant_note_first records newly stored runs (not station faults) as their
-- serials' first when they are earlier than what is kept. It runs with its
-- owner's rights: a station role may call it without the right to write
-- the table directly. Serials are locked in sorted order, so two stations
-- noting the same serials cannot deadlock.
CREATE FUNCTION plant_note_first(s text[], a bigint[], l int[], i bigint[]) RETURNS void LANGUAGE sql
	SECURITY DEFINER SET search_path FROM CURRENT AS $$
INSERT INTO serial_first AS f (serial, at, log_id, local_id)
SELECT DISTINCT ON (u.s) u.s, u.a, u.l, u.i FROM unnest(s, a, l, i) AS u(s, a, l, i)
ORDER BY u.s, u.a, u.l, u.i
ON CONFLICT (serial) DO UPDATE SET at = EXCLUDED.at, log_id = EXCLUDED.log_id, local_id = EXCLUDED.local_id
WHERE (EXCLUDED.at, EXCLUDED.log_id, EXCLUDED.local_id) < (f.at, f.log_id, f.local_id)
$$;
