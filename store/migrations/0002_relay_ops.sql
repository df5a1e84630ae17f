-- 0002: persisted relay operation counts per fixture and ladder rung, so a
-- worn reed relay can be flagged across restarts.
CREATE TABLE relay_ops (
	fixture_id INTEGER NOT NULL REFERENCES fixtures(id),
	rung       INTEGER NOT NULL CHECK (rung >= 0),
	count      INTEGER NOT NULL CHECK (count >= 0),
	PRIMARY KEY (fixture_id, rung)
) WITHOUT ROWID;
