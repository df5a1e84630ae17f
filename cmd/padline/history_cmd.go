package main

import (
	"errors"
	"fmt"
	"padline/sequences"
	"padline/store"
	"padline/store/history"
	"time"

	"github.com/spf13/cobra"
	"github.com/spf13/pflag"
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

// historyFlags are the flags of `padline history`.
type historyFlags struct {
	stationFile                                     string
	serial, variant, station, fixture, lot, verdict string
	since, until, format, per                       string
	withSim, asJSON, limitsHistory                  bool
	panel                                           string
	site                                            int
}

// historyCmd builds `padline history`.
func (a *app) historyCmd() *cobra.Command {
	var f historyFlags
	cmd := &cobra.Command{
		Use:     "history --serial S | --variant V [filters]",
		Short:   "Query the shift log: runs of a serial or a variant, exports, limit changes",
		Long:    historyLong,
		Example: historyExample,
		Args:    cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			opts, err := f.options(cmd)
			if err != nil {
				return err
			}
			return history.Write(cmd.Context(), a.stdout, opts)
		},
	}
	f.add(cmd.Flags())
	return cmd
}

// add defines the flags.
func (f *historyFlags) add(fl *pflag.FlagSet) {
	fl.StringVar(new(string), "db", "", "shift log file (default: $PADLINE_DB, the station file's shift_log, else ./"+defaultShiftLog+")")
	fl.StringVar(&f.stationFile, "station-file", "", "station file (or built-in name) whose shift_log to read")
	fl.StringVar(&f.serial, "serial", "", "runs of this unit serial")
	fl.StringVar(&f.variant, "variant", "", "runs of this product variant, e.g. QM-205")
	fl.StringVar(&f.since, "since", "", "from this time on (inclusive): 8h, 2d, 2026-11-30, \"2026-11-30 14:00\"")
	fl.StringVar(&f.until, "until", "", "before this time (exclusive); same forms as --since")
	stationIDFlag(fl, &f.station)
	fl.StringVar(&f.fixture, "fixture", "", "only runs on this fixture, e.g. FX-07")
	fl.StringVar(&f.lot, "lot", "", "only runs of this lot")
	fl.BoolVar(&f.withSim, "include-simulated", false, "in a log with runs of a real station, also show simulated runs (left out by default)")
	fl.StringVar(&f.panel, "panel", "", "runs of this panel (every site), with its x-outs")
	fl.IntVar(&f.site, "site", 0, "only runs tested at this panel site (1-based)")
	fl.StringVar(&f.verdict, "verdict", "", "only runs with this verdict: pass, fail or station-fault")
	fl.StringVar(&f.format, "format", "table", "output: table, csv or json (JSON lines)")
	fl.BoolVar(&f.asJSON, "json", false, "same as --format json")
	fl.StringVar(&f.per, "per", "run", "with --format csv: one row per run or per measurement")
	fl.BoolVar(&f.limitsHistory, "limits-history", false, "list when the variant's configuration hash changed")
}

// options checks the flags and turns them into the query.
func (f *historyFlags) options(cmd *cobra.Command) (history.Options, error) {
	if err := checkStationAlias(cmd.Flags(), "history", cmd.ErrOrStderr()); err != nil {
		return history.Options{}, err
	}
	db, err := shiftLogPath(cmd, f.stationFile)
	if err != nil {
		return history.Options{}, fmt.Errorf("history: %w", err)
	}
	opts := history.Options{DB: db, Format: f.format, Per: f.per, LimitsHistory: f.limitsHistory, IncludeSimulated: f.withSim}
	if f.per != "run" && f.per != "measurement" {
		return opts, fmt.Errorf("history: --per must be run or measurement, got %q", f.per)
	}
	if f.asJSON {
		if cmd.Flags().Changed("format") && f.format != "json" {
			return opts, fmt.Errorf("history: --json conflicts with --format %s", f.format)
		}
		opts.Format = "json"
	}
	switch opts.Format {
	case "table", "csv", "json":
	default:
		return opts, fmt.Errorf("history: --format must be table, csv or json, got %q", opts.Format)
	}
	if f.serial == "" && f.variant == "" && f.panel == "" {
		return opts, errors.New("history: give --serial S or --variant V, or --panel P (see padline history --help)")
	}
	if f.site < 0 {
		return opts, fmt.Errorf("history: --site %d: sites count from 1", f.site)
	}
	if f.limitsHistory && f.variant == "" {
		return opts, errors.New("history: --limits-history needs --variant")
	}
	now := time.Now()
	q := store.Filter{Serial: f.serial, Variant: f.variant, Station: f.station, Fixture: f.fixture, Lot: f.lot, Panel: f.panel, Site: f.site}
	if q.Since, err = store.ParseWhen(f.since, now); err != nil {
		return opts, fmt.Errorf("history: --since: %w", err)
	}
	if q.Until, err = store.ParseWhen(f.until, now); err != nil {
		return opts, fmt.Errorf("history: --until: %w", err)
	}
	switch sequences.Verdict(f.verdict) {
	case "", sequences.Pass, sequences.Fail, sequences.StationFault:
		q.Verdict = sequences.Verdict(f.verdict)
	default:
		return opts, fmt.Errorf("history: --verdict must be pass, fail or station-fault, got %q", f.verdict)
	}
	opts.Filter = q
	return opts, nil
}
