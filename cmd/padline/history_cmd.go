package main

import (
	"fmt"
	"time"

	"github.com/spf13/cobra"

	"padline/store/history"
)

const historyLong = `history answers "what did this unit measure, and under which limits?" and
"how has this variant been testing?" from the station's SQLite shift log.

Select runs with --serial (every run of one unit, with its measurements and
limits), --variant (runs of one product variant) or --panel (every site of
one panel, and its x-outs: sites marked bad and not tested); --site N keeps
the runs tested at panel site N. Narrow them with
--since/--until, --station-id, --fixture, --lot and --verdict. Runs are listed
oldest first, by the time their verdict was given.

--since and --until take a duration back from now (90m, 8h, 2d) or a date or
time in local time (2026-11-30, "2026-11-30 14:00", 2026-11-30T14:00:00Z);
--since is inclusive, --until exclusive.

Formats:
  table  one line per run: id, finish time, serial, station, fixture, lot,
         verdict, fail code, trip point (pF); with --serial also each
         measurement with its limits and the configuration hash
  csv    one row per run (--per run, the default: a series 'padline drift
         --csv' reads once per test), or one row per measurement with the
         run's columns repeated (--per measurement)
  json   JSON lines: one object per run with its measurements nested
         (--json is short for --format json)

--limits-history --variant V lists when the variant's configuration (and so
its limits) changed: each distinct config hash and when it was first seen.

The shift log is, first found: --db PATH, the environment variable
PADLINE_DB, the shift_log of --station-file, else ./` + defaultShiftLog + `.
history never creates a shift log. --db postgres://… reads the plant store
instead: every station's forwarded runs, with the same filters and the same
numbers as each station's own log (see 'padline plant --help').`

const historyExample = `  padline history --serial QM205-001234
  padline history --variant QM-205 --since 8h
  padline history --variant QM-205 --since 2026-11-30 --until 2026-12-01 --verdict fail
  padline history --variant QM-205 --station-id L2-S1 --lot LOT-17 --format csv > lot17.csv
  padline history --variant QM-205 --json | jq .trip_pf
  padline history --limits-history --variant QM-205
  padline history --db postgres://quality@plant-db/plant --serial QM205-001234
  padline history --panel QM205-0001
  PADLINE_DB=/var/lib/padline/L2-S1.db padline history --serial QM205-001234`

// historyCmd builds `padline history`.
func (a *app) historyCmd() *cobra.Command {
	var (
		q           history.Query
		stationFile string
	)
	cmd := &cobra.Command{
		Use:     "history --serial S | --variant V [filters]",
		Short:   "Query the shift log: runs of a serial or a variant, exports, limit changes",
		Long:    historyLong,
		Example: historyExample,
		Args:    cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) (err error) {
			if err := checkStationAlias(cmd.Flags(), "history", cmd.ErrOrStderr()); err != nil {
				return err
			}
			if q.DB, err = shiftLogPath(cmd, stationFile); err != nil {
				return fmt.Errorf("history: %w", err)
			}
			q.FormatGiven = cmd.Flags().Changed("format")
			opts, err := q.Options(time.Now())
			if err != nil {
				return err
			}
			return history.Write(cmd.Context(), a.stdout, opts)
		},
	}
	fl := cmd.Flags()
	fl.StringVar(new(string), "db", "", "shift log file (default: $PADLINE_DB, the station file's shift_log, else ./"+defaultShiftLog+")")
	fl.StringVar(&stationFile, "station-file", "", "station file (or built-in name) whose shift_log to read")
	fl.StringVar(&q.Serial, "serial", "", "runs of this unit serial")
	fl.StringVar(&q.Variant, "variant", "", "runs of this product variant, e.g. QM-205")
	fl.StringVar(&q.Since, "since", "", "from this time on (inclusive): 8h, 2d, 2026-11-30, \"2026-11-30 14:00\"")
	fl.StringVar(&q.Until, "until", "", "before this time (exclusive); same forms as --since")
	stationIDFlag(fl, &q.Station)
	fl.StringVar(&q.Fixture, "fixture", "", "only runs on this fixture, e.g. FX-07")
	fl.StringVar(&q.Lot, "lot", "", "only runs of this lot")
	fl.BoolVar(&q.IncludeSimulated, "include-simulated", false, "in a log with runs of a real station, also show simulated runs (left out by default)")
	fl.StringVar(&q.Panel, "panel", "", "runs of this panel (every site), with its x-outs")
	fl.IntVar(&q.Site, "site", 0, "only runs tested at this panel site (1-based)")
	fl.StringVar(&q.Verdict, "verdict", "", "only runs with this verdict: pass, fail or station-fault")
	fl.StringVar(&q.Format, "format", "table", "output: table, csv or json (JSON lines)")
	fl.BoolVar(&q.JSON, "json", false, "same as --format json")
	fl.StringVar(&q.Per, "per", "run", "with --format csv: one row per run or per measurement")
	fl.BoolVar(&q.LimitsHistory, "limits-history", false, "list when the variant's configuration hash changed")
	return cmd
}
