package main

import (
	"context"
	"errors"
	"padline/sequences/session"

	"github.com/spf13/cobra"
)

func (a *app) stationStatusCmd() *cobra.Command {
	var station string
	var asJSON, checkLog bool
	cmd := withHelp("station-status", &cobra.Command{
		Use:   "status --station FILE",
		Short: "Last check, last studies, the station's uncertainty U and relay wear",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			dbPath, err := shiftLogPath(cmd, station)
			if err != nil {
				return err
			}
			return a.stationStatus(cmd.Context(), station, dbPath, asJSON, checkLog)
		},
	})
	f := cmd.Flags()
	f.StringVar(&station, "station", "", "station file: a .yaml file or a built-in name (required)")
	addShiftLogFlag(f)
	f.BoolVar(&asJSON, "json", false, "print the status as one JSON object")
	f.BoolVar(&checkLog, "check-log", false, "also read the whole shift log for damage (SQLite quick_check; half a minute on a million runs); exit 1 on damage")
	_ = cmd.MarkFlagRequired("station")
	return cmd
}

// stationStatus prints the station's status from its shift log.
func (a *app) stationStatus(ctx context.Context, station, dbPath string, asJSON, checkLog bool) error {
	st, err := session.LoadStation(station)
	if err != nil {
		return err
	}
	rep, err := session.Status(ctx, st, dbPath)
	if err == nil && checkLog {
		rep.LogCheck, err = session.CheckLog(ctx, dbPath)
	}
	if err != nil {
		return err
	}
	if asJSON {
		return errors.Join(writeJSON(a.stdout, rep), rep.LogCheck.Err())
	}
	session.WriteStatus(a.stdout, rep, st)
	return rep.LogCheck.Err()
}
