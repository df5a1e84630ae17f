-- 0006: indexes that cover the drift and yield queries, so a year of one
-- station's runs is read from an index in time order without visiting a
-- single table row.
--
-- runs_variant_trip replaces runs_variant_finished (its first two columns
-- are the same, so every query that used it still can). It carries the run
-- id next, so (finished, id), the order every series is read in, is the
-- index order; then everything a trip series or a yield count reads:
-- verdict, trip point, station, fixture, lot, serial, driver, site and panel.
CREATE INDEX runs_variant_trip ON runs (variant_id, finished, id, verdict, trip_pf, station_id, fixture_id, lot, serial, driver, site, panel);
DROP INDEX runs_variant_finished;

-- runs_serial_verdict replaces runs_serial: the first-pass yield asks, for
-- each run, whether its serial has an earlier unit verdict, and now finds
-- the answer in the index alone.
CREATE INDEX runs_serial_verdict ON runs (serial, finished, id, verdict);
DROP INDEX runs_serial;
