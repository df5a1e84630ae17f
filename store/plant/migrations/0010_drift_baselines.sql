-- 0010: approved drift baselines of the plant, as the station's shift log
-- keeps its own (store migration 0007): the centre and σ of a variant's
-- passed units' trip points over a chosen window, approved on the plant
-- with 'padline drift baseline set --db postgres://…' and used by
-- 'padline drift --db postgres://…'. They are approved here, not forwarded
-- from stations: each database holds the baselines approved on it, one
-- writer each (DEVELOPERS.md "Approved baselines on the plant"). Times are
-- integer nanoseconds since the Unix epoch, UTC.
CREATE TABLE drift_baselines (
	id           bigserial PRIMARY KEY,
	variant      text   NOT NULL CHECK (variant <> ''),
	name         text   NOT NULL CHECK (name <> ''),
	centre       float8 NOT NULL CHECK (centre > '-Infinity' AND centre < 'Infinity'),
	sigma        float8 NOT NULL CHECK (sigma > 0 AND sigma < 'Infinity'),
	n            int    NOT NULL CHECK (n >= 2),
	method       text   NOT NULL,
	since        bigint NOT NULL,
	until        bigint NOT NULL CHECK (until >= since),
	first_serial text   NOT NULL,
	last_serial  text   NOT NULL,
	approved_by  text   NOT NULL,
	approved_at  bigint NOT NULL
);
CREATE INDEX drift_baselines_variant ON drift_baselines (variant, id);

-- Readers (the line board, quality engineers) and station roles may read
-- them; only the schema owner approves.
DO $$
DECLARE r text;
BEGIN
	FOR r IN SELECT DISTINCT grantee FROM information_schema.role_table_grants
		WHERE table_schema = current_schema() AND table_name = 'serial_first' AND privilege_type = 'SELECT'
		AND grantee <> current_user LOOP
		EXECUTE format('GRANT SELECT ON drift_baselines TO %I', r);
	END LOOP;
END $$;
