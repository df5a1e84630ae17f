-- Seeds the plant store's scale figures: 10,000,000 runs from 20 stations
-- (4 lines of 5), 10 variants, over 180 days from 2026-06-01 UTC, generated
-- on the server. Each station changes variant every 1,000 units, so a
-- variant's runs come from every station. Trip points: 29.7 pF + noise (sum
-- of three uniforms, σ ≈ 0.3 pF); 1 % fails, 0.3 % station faults; each
-- run has 4 measurements. Invented demo data. Run in the target schema
-- after the plant migrations.
INSERT INTO stations (name, line)
SELECT format('L%s-S%s', (g - 1) / 5 + 1, (g - 1) % 5 + 1), format('L%s', (g - 1) / 5 + 1) FROM generate_series(1, 20) g;
INSERT INTO logs (uuid, station_id) SELECT md5(g::text)::uuid, g FROM generate_series(1, 20) g;
INSERT INTO variants (name) SELECT format('QM-%s', 200 + g) FROM generate_series(1, 10) g;
INSERT INTO fixtures (name) SELECT format('FX-%s', g) FROM generate_series(1, 20) g;
INSERT INTO configs (variant_id, hash, snapshot, first_seen) SELECT g, md5(g::text), '', 1780272000000000000 FROM generate_series(1, 10) g;
INSERT INTO quantities (step, name, unit) VALUES ('clock', 'freq_hz', 'Hz'), ('idle', 'latched', ''),
	('trip_search', 'trip_pf', 'pF'), ('trip_search', 'spread_pf', 'pF');
SELECT plant_ensure_month(1780272000000000000 + m * 2592000000000000) FROM generate_series(0, 6) m;
INSERT INTO runs (log_id, local_id, station_id, serial, variant_id, config_id, fixture_id, operator, lot, site,
	software, started, finished, at, received, verdict, fail_code, trip_pf)
SELECT s, l, s, 'SN' || lpad(g::text, 8, '0'), v, v, s, 'op', 'LOT-' || (l / 5000), '', 'bench',
	t - 2000000000, t, t, t + 1000000000,
	CASE WHEN u < 0.01 THEN 'fail' WHEN u < 0.013 THEN 'station-fault' ELSE 'pass' END,
	CASE WHEN u < 0.01 THEN 'trip_high' WHEN u < 0.013 THEN 'lid_open' ELSE '' END,
	CASE WHEN u < 0.01 THEN 34.5 + random() WHEN u < 0.013 THEN NULL ELSE 29.7 + 0.6 * (random() + random() + random() - 1.5) END
FROM (
	SELECT g, g % 20 + 1 AS s, g / 20 + 1 AS l, (g / 20 / 1000 + g % 20) % 10 + 1 AS v,
		1780272000000000000 + g * 1555200000 AS t, random() AS u
	FROM generate_series(0::bigint, 9999999) g
) x;
INSERT INTO measurements (log_id, local_id, finished, seq, station_id, quantity_id, value, low, high, verdict)
SELECT r.log_id, r.local_id, r.finished, q.seq, r.station_id, q.seq + 1,
	CASE q.seq WHEN 2 THEN r.trip_pf WHEN 0 THEN 500 WHEN 1 THEN 0 ELSE 0.6 END,
	CASE q.seq WHEN 2 THEN 25 WHEN 0 THEN 100 ELSE NULL END,
	CASE q.seq WHEN 2 THEN 34 WHEN 0 THEN 1000 WHEN 1 THEN 0 ELSE NULL END, 'pass'
FROM runs r CROSS JOIN generate_series(0, 3) AS q(seq);
INSERT INTO serial_first (serial, at, log_id, local_id, station_id, variant_id, fixture_id, lot, site, verdict)
SELECT serial, at, log_id, local_id, station_id, variant_id, fixture_id, lot, site, verdict FROM runs WHERE verdict <> 'station-fault';
ANALYZE;
