package main

import (
	"fmt"
	"io"
	"strings"

	"github.com/spf13/pflag"
)

// stationIDFlag defines --station-id, the station-name filter of history and
// drift. --station stays one release as its hidden, deprecated spelling:
// everywhere else --station is a station file.
func stationIDFlag(fl *pflag.FlagSet, dst *string) {
	fl.StringVar(dst, "station-id", "", "only runs of this station name (the station file's name:, e.g. L2-S1)")
	fl.StringVar(dst, "station", "", "deprecated spelling of --station-id")
	_ = fl.MarkHidden("station")
}

// checkStationAlias warns on the old --station filter on stderr (stdout may be
// CSV or JSON) and refuses a file name given to it, which would match nothing.
func checkStationAlias(fl *pflag.FlagSet, verb string, stderr io.Writer) error {
	f := fl.Lookup("station")
	if f == nil || !f.Changed {
		return nil
	}
	v := f.Value.String()
	if ext := strings.ToLower(v); strings.HasSuffix(ext, ".yaml") || strings.HasSuffix(ext, ".yml") {
		return fmt.Errorf("%s: --station %s looks like a station file, but here --station is the old name filter: give the file as --station-file %s", verb, v, v)
	}
	fmt.Fprintf(stderr, "%s: --station is deprecated here (it filters by station name); write --station-id %s\n", verb, v)
	return nil
}
