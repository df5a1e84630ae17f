-- 0006: as in the station's shift log, every run records the station
-- driver that produced it (sim or gpio) and, for a station-fault verdict,
-- the fault's message; runs forwarded before this carry ''.
ALTER TABLE runs ADD COLUMN driver text NOT NULL DEFAULT '';
ALTER TABLE runs ADD COLUMN fault text NOT NULL DEFAULT '';
CREATE INDEX runs_driver ON runs (driver);
