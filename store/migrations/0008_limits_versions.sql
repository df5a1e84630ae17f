-- 0008: limits as versions with approval. Every change of the limits a run
-- judges against (the variant file, the station's U from a study, the guard
-- band) is a new version of a station, fixture and variant, pending until
-- someone approves it ('padline limits approve') or rejects it; runs use an
-- approved version only. Times are integer nanoseconds since the Unix
-- epoch, UTC; decided and its columns stay empty while pending.
CREATE TABLE limits_versions (
	id           INTEGER PRIMARY KEY,
	station      TEXT    NOT NULL,
	fixture      TEXT    NOT NULL,
	variant      TEXT    NOT NULL,
	created      INTEGER NOT NULL,
	cause        TEXT    NOT NULL,
	variant_hash TEXT    NOT NULL,
	u_pf         REAL    NOT NULL CHECK (u_pf > 0),
	u_source     TEXT    NOT NULL,
	low_pf       REAL    NOT NULL,
	high_pf      REAL    NOT NULL CHECK (high_pf > low_pf),
	status       TEXT    NOT NULL CHECK (status IN ('pending', 'approved', 'rejected')),
	approved_by  TEXT    NOT NULL DEFAULT '',
	decided      INTEGER NOT NULL DEFAULT 0,
	reason       TEXT    NOT NULL DEFAULT ''
);

CREATE INDEX limits_versions_key ON limits_versions (station, fixture, variant, id);
