-- 0007: approved drift baselines. A quality engineer approves the centre
-- and σ of a variant's trip points over a chosen window ('padline drift
-- baseline set'); drift charts and rules use the variant's latest approved
-- baseline instead of the first points of whatever window is selected.
-- Times are integer nanoseconds since the Unix epoch, UTC.
CREATE TABLE drift_baselines (
	id           INTEGER PRIMARY KEY,
	variant      TEXT    NOT NULL,
	name         TEXT    NOT NULL,
	centre       REAL    NOT NULL,
	sigma        REAL    NOT NULL CHECK (sigma > 0),
	n            INTEGER NOT NULL CHECK (n >= 2),
	method       TEXT    NOT NULL,
	since        INTEGER NOT NULL,
	until        INTEGER NOT NULL,
	first_serial TEXT    NOT NULL,
	last_serial  TEXT    NOT NULL,
	approved_by  TEXT    NOT NULL,
	approved_at  INTEGER NOT NULL
);

CREATE INDEX drift_baselines_variant ON drift_baselines (variant, id);
