package main

import (
	"os"

	"github.com/spf13/cobra"
	"github.com/spf13/pflag"

	"padline/sequences/session"
)

// defaultShiftLog is the shift log every command uses when
// neither --db, PADLINE_DB nor a station file names one.
const defaultShiftLog = "padline-shift.db"

// shiftLogPath resolves the shift log: --db, then $PADLINE_DB, then the
// station file's shift_log, then the default in the working directory.
func shiftLogPath(cmd *cobra.Command, stationRef string) (string, error) {
	if f := cmd.Flags().Lookup("db"); f != nil && f.Value.String() != "" {
		return f.Value.String(), nil
	}
	if p := os.Getenv("PADLINE_DB"); p != "" {
		return p, nil
	}
	if stationRef != "" {
		st, err := session.LoadStation(stationRef)
		if err != nil {
			return "", err
		}
		if st.ShiftLog != "" {
			return st.ShiftLog, nil
		}
	}
	return defaultShiftLog, nil
}

// plantOrLog is the --db usage of the commands that also read the plant store.
const plantOrLog = "shift log, or the plant store postgres://USER@HOST/DB (default: $PADLINE_DB, the station file's shift_log, else ./" + defaultShiftLog + ")"

// addShiftLogFlag adds the --db flag that shiftLogPath reads.
func addShiftLogFlag(f *pflag.FlagSet) {
	f.String("db", "", "shift log (default: $PADLINE_DB, the station file's shift_log, else ./"+defaultShiftLog+")")
}
