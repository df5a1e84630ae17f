-- 0005: panels. A run of a unit tested on a panel names the panel (its
-- label) and the site (1-based board position); both are NULL for a unit
-- tested on its own. A site marked bad on the panel before test (an x-out)
-- is skipped and logged here as not tested: it has no run.
ALTER TABLE runs ADD COLUMN panel TEXT;
ALTER TABLE runs ADD COLUMN site INTEGER CHECK (site IS NULL OR site >= 1);

CREATE INDEX runs_panel ON runs (panel, site) WHERE panel IS NOT NULL;

CREATE TABLE xouts (
	id         INTEGER PRIMARY KEY,
	time       INTEGER NOT NULL,
	panel      TEXT    NOT NULL,
	site       INTEGER NOT NULL CHECK (site >= 1),
	serial     TEXT    NOT NULL,
	variant_id INTEGER NOT NULL REFERENCES variants(id),
	station_id INTEGER NOT NULL REFERENCES stations(id),
	fixture_id INTEGER NOT NULL REFERENCES fixtures(id),
	operator   TEXT    NOT NULL,
	UNIQUE (panel, site, time)
);
