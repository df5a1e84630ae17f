-- 0005: forwarding to the plant store. One row holds this shift log's
-- identity in the plant (log_uuid, 32 hex digits, random at creation) and
-- the outbox cursors: the highest run, check and study id already forwarded
-- (or refused by the plant). Times are integer nanoseconds, UTC.
CREATE TABLE plant_outbox (
	id              INTEGER PRIMARY KEY CHECK (id = 1),
	log_uuid        TEXT    NOT NULL,
	run_cursor      INTEGER NOT NULL DEFAULT 0,
	check_cursor    INTEGER NOT NULL DEFAULT 0,
	study_cursor    INTEGER NOT NULL DEFAULT 0,
	forwarded       INTEGER NOT NULL DEFAULT 0,
	last_time       INTEGER,
	last_error      TEXT    NOT NULL DEFAULT '',
	last_error_time INTEGER
);

INSERT INTO plant_outbox (id, log_uuid) VALUES (1, lower(hex(randomblob(16))));

-- Rows the plant store refused (a forged station, a limit the plant's
-- constraints reject): kept with the database's reason, never retried.
CREATE TABLE plant_refused (
	kind     TEXT    NOT NULL CHECK (kind IN ('run', 'check', 'study')),
	local_id INTEGER NOT NULL,
	time     INTEGER NOT NULL,
	reason   TEXT    NOT NULL,
	PRIMARY KEY (kind, local_id)
) WITHOUT ROWID;
