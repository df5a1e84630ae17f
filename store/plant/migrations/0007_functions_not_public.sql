-- 0007: the functions that write with their owner's rights
-- (plant_ensure_month, plant_note_first) are no longer executable by every
-- role (PostgreSQL grants EXECUTE to PUBLIC by default: manual, "5.7
-- Privileges"): only station roles may call them, so the line board's
-- read-only role (AddReader) writes nothing at all.
REVOKE EXECUTE ON FUNCTION plant_ensure_month(bigint) FROM PUBLIC;
REVOKE EXECUTE ON FUNCTION plant_note_first(text[], bigint[], int[], bigint[], int[], int[], int[], text[], text[], text[]) FROM PUBLIC;
DO $$
DECLARE r text;
BEGIN
	FOR r IN SELECT db_role FROM stations WHERE db_role IS NOT NULL LOOP
		EXECUTE format('GRANT EXECUTE ON FUNCTION plant_ensure_month(bigint), plant_note_first(text[], bigint[], int[], bigint[], int[], int[], int[], text[], text[], text[]) TO %I', r);
	END LOOP;
END $$;
