-- 0004: every run records the station driver that produced it (sim or
-- gpio: simulated runs must never pass for real units) and, for a
-- station-fault verdict, the fault's message (the pin or step at fault).
-- Runs from before this migration keep '' for both.
ALTER TABLE runs ADD COLUMN driver TEXT NOT NULL DEFAULT '';
ALTER TABLE runs ADD COLUMN fault TEXT NOT NULL DEFAULT '';
CREATE INDEX runs_driver ON runs(driver);
