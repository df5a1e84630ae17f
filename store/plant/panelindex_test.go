package plant_test

import (
	"context"
	"encoding/json"
	"fmt"
	"strconv"
	"strings"
	"testing"

	"github.com/jackc/pgx/v5"

	"padline/store"
	"padline/store/plant"
)

// The runs of one panel are found through the partial index runs_panel
// (migration 0012), not by reading every month partition: the schema has
// the index as the migration makes it, and on a plant of 120,000 runs over
// two months, 48 of them on panels, with the statistics ANALYZE gathers
// (most runs carry an empty panel), PostgreSQL plans the query Runs sends
// for --panel (alone, with --site, --variant or --station) as index scans
// of it on every month partition. Both the custom plan (a query's first
// executions) and the generic plan PostgreSQL may switch to for a
// prepared statement are checked: the generic one uses the partial index
// only because where() writes its predicate out (PostgreSQL manual,
// "Partial Indexes"). Without the index only a sequential scan can answer,
// and the test fails.
func TestPanelIndexServesPanelRuns(t *testing.T) {
	url, schema := newSchema(t, baseURL())
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(ctx)

	var def string
	if err := conn.QueryRow(ctx, `SELECT indexdef FROM pg_indexes WHERE schemaname = $1 AND tablename = 'runs'
		AND indexname = 'runs_panel'`, schema).Scan(&def); err != nil {
		t.Fatalf("index runs_panel on runs: %v", err)
	}
	if !strings.Contains(def, "(panel, at, log_id, local_id) WHERE (panel <> ''::text)") {
		t.Fatalf("runs_panel is %s; want (panel, at, log_id, local_id) WHERE (panel <> '')", def)
	}

	// 120,000 runs from 20 stations over 60 days from 2026-06-01 UTC (two
	// month partitions, made after the migration), as the scale seed
	// (testdata/plant/scale/seed.sql) makes them; on station 4, 8
	// consecutive units out of every 1,000 are one panel (PNL-<k>, sites
	// 1-8): 6 panels, 48 panel runs. Invented demo data.
	if _, err := conn.Exec(ctx, `
INSERT INTO stations (name, line) SELECT format('L%s-S%s', (g - 1) / 5 + 1, (g - 1) % 5 + 1), format('L%s', (g - 1) / 5 + 1)
	FROM generate_series(1, 20) g;
INSERT INTO variants (name) SELECT format('QM-%s', 200 + g) FROM generate_series(1, 10) g;
SELECT plant_ensure_month(1780272000000000000 + m * 2592000000000000) FROM generate_series(0, 2) m;
INSERT INTO runs (log_id, local_id, station_id, serial, variant_id, config_id, fixture_id, operator, lot, site, panel,
	software, started, finished, at, received, verdict, fail_code, trip_pf)
SELECT s, l, s, 'SN' || lpad(g::text, 8, '0'), v, v, s, 'op', 'LOT-' || (l / 5000),
	CASE WHEN pnl THEN ((l - 1) % 1000 + 1)::text ELSE '' END, CASE WHEN pnl THEN 'PNL-' || ((l - 1) / 1000) ELSE '' END,
	'bench', t - 2000000000, t, t, t + 1000000000, 'pass', '', 29.7
FROM (SELECT g, g % 20 + 1 AS s, g / 20 + 1 AS l, (g / 20 / 1000 + g % 20) % 10 + 1 AS v,
	1780272000000000000 + g * 43200000000 AS t, g % 20 = 3 AND (g / 20) % 1000 < 8 AS pnl
	FROM generate_series(0::bigint, 119999) g) x;
ANALYZE runs;
`); err != nil {
		t.Fatal(err)
	}
	var panelRuns, months int64
	if err := conn.QueryRow(ctx, `SELECT count(*) FILTER (WHERE panel <> ''), count(DISTINCT tableoid) FROM runs`).Scan(&panelRuns, &months); err != nil {
		t.Fatal(err)
	}
	if panelRuns != 48 || months != 2 {
		t.Fatalf("seeded %d panel runs over %d month partitions, want 48 over 2", panelRuns, months)
	}

	db := openPlant(t, url)
	filters := []store.Filter{
		{Panel: "PNL-2"},
		{Panel: "PNL-2", Site: 3},
		{Panel: "PNL-2", Variant: "QM-206"},
		{Panel: "PNL-2", Station: "L1-S4"},
	}
	for i, f := range filters {
		// The query answers: the panel's runs, its sites in order.
		var sites []int
		for e, err := range db.Runs(ctx, f) {
			if err != nil {
				t.Fatal(err)
			}
			sites = append(sites, e.Site)
		}
		want := map[int]int{0: 8, 3: 1}[f.Site] // PNL-2's units are of QM-206, on L1-S4
		if len(sites) != want {
			t.Fatalf("%+v: %d runs (sites %v), want %d", f, len(sites), sites, want)
		}
		q, args := plant.RunsSQLForTest(f)
		for j, mode := range []string{"force_custom_plan", "force_generic_plan"} {
			name := fmt.Sprintf("panel_runs_%d_%d", i, j)
			if _, err := conn.Exec(ctx, "SET plan_cache_mode = "+mode+"; PREPARE "+name+" AS "+q); err != nil {
				t.Fatal(err)
			}
			lits := make([]string, len(args))
			for i, a := range args {
				lits[i] = literal(t, a)
			}
			var plan string
			if err := conn.QueryRow(ctx, "EXPLAIN (FORMAT JSON) EXECUTE "+name+"("+strings.Join(lits, ", ")+")").Scan(&plan); err != nil {
				t.Fatal(err)
			}
			scans := runsScans(t, plan)
			if len(scans) != 2 {
				t.Fatalf("%+v, %s: runs read as %v, want one scan of each of the 2 month partitions; plan:\n%s", f, mode, scans, plan)
			}
			for _, s := range scans {
				if !strings.Contains(s, "_panel_") {
					t.Fatalf("%+v, %s: runs read as %v, want index scans of runs_panel on every partition; plan:\n%s", f, mode, scans, plan)
				}
			}
		}
	}
}

// literal writes a query argument as an SQL literal, for EXECUTE.
func literal(t *testing.T, a any) string {
	switch v := a.(type) {
	case string:
		return "'" + strings.ReplaceAll(v, "'", "''") + "'"
	case int64:
		return strconv.FormatInt(v, 10)
	}
	t.Fatalf("argument %v (%T): no literal", a, a)
	return ""
}

// runsScans lists the scans of the runs partitions in a JSON plan, each as
// "node type on relation [using index]".
func runsScans(t *testing.T, plan string) []string {
	var top []struct{ Plan map[string]any }
	if err := json.Unmarshal([]byte(plan), &top); err != nil || len(top) != 1 {
		t.Fatalf("plan %s: %v", plan, err)
	}
	var out []string
	var walk func(n map[string]any)
	walk = func(n map[string]any) {
		if rel, _ := n["Relation Name"].(string); strings.HasPrefix(rel, "runs") {
			s := fmt.Sprintf("%s on %s", n["Node Type"], rel)
			if ix, ok := n["Index Name"].(string); ok {
				s += " using " + ix
			}
			out = append(out, s)
		}
		kids, _ := n["Plans"].([]any)
		for _, k := range kids {
			if m, ok := k.(map[string]any); ok {
				walk(m)
			}
		}
	}
	walk(top[0].Plan)
	return out
}
