-- 0004: the (variant_id, at) index carries every column the drift series
-- and its yield read, in the series' order, so a variant's trip points —
-- the last 100,000 or all of them, by station, fixture, lot or site — are
-- read from the index alone once autovacuum has marked the pages visible,
-- without a sort and without visiting the runs.
DROP INDEX runs_variant_at;
CREATE INDEX runs_variant_at ON runs (variant_id, at, log_id, local_id)
	INCLUDE (trip_pf, verdict, station_id, fixture_id, lot, site, serial);
