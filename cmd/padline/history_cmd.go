package main

import (
	"fmt"
	"time"

	"github.com/spf13/cobra"

	"padline/store/history"
)

// historyCmd builds `padline history`.
func (a *app) historyCmd() *cobra.Command {
	var (
		q           history.Query
		stationFile string
	)
	cmd := withHelp("history", &cobra.Command{
		Use:   "history --serial S | --variant V [filters]",
		Short: "Query the shift log: runs of a serial or a variant, exports, limit changes",
		Args:  cobra.NoArgs,
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
	})
	fl := cmd.Flags()
	fl.StringVar(new(string), "db", "", plantOrLog)
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
