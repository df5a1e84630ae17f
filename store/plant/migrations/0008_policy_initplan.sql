-- 0008: the row-level policies call plant_my_station() once per statement
-- instead of once per row. The function carries SET search_path, so
-- PostgreSQL does not inline it (PostgreSQL wiki, "Inlining of SQL
-- functions": a function with SET clauses is never inlined) and, being
-- STABLE, evaluated it for every row a station role wrote or read: a
-- catch-up batch of 5,000 runs with 20,000 measurements called it 25,000
-- times, half the server's CPU of the batch (BenchmarkCatchUp, 2.3 s of
-- backend CPU per 20,000 runs as the station's role against 1.2 s as the
-- owner). An uncorrelated scalar sub-select is computed once per
-- statement, as an InitPlan (PostgreSQL manual, "Using EXPLAIN"). Who may
-- write what is unchanged: a row under another station's id is refused as
-- before (TestBadRowsRefusedRestLands).
DROP POLICY own_station ON logs;
DROP POLICY own_station ON runs;
DROP POLICY own_station ON measurements;
DROP POLICY own_station ON station_checks;
DROP POLICY own_station ON studies;
DROP POLICY own_station ON relay_wear;
CREATE POLICY own_station ON logs USING (station_id = (SELECT plant_my_station()));
CREATE POLICY own_station ON runs USING (station_id = (SELECT plant_my_station()));
CREATE POLICY own_station ON measurements USING (station_id = (SELECT plant_my_station()));
CREATE POLICY own_station ON station_checks USING (station_id = (SELECT plant_my_station()));
CREATE POLICY own_station ON studies USING (station_id = (SELECT plant_my_station()));
CREATE POLICY own_station ON relay_wear USING (station_id = (SELECT plant_my_station()));
