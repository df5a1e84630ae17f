package store

import (
	"context"
	"encoding/csv"
	"fmt"
	"io"
	"strconv"
)

// RunCSVHeader is the header row of WriteRunCSV: the run's columns of
// CSVHeader without the measurement columns.
var RunCSVHeader = []string{
	"run_id", "serial", "variant", "config_hash", "station", "fixture", "operator", "lot",
	"software", "started", "finished", "verdict", "fail_code", "trip_pf", "panel", "site",
}

// WriteRunCSV streams the runs matching f to w as CSV with one row per run
// (a series: each unit's trip point once per test); fields are written as
// WriteCSV writes them. It returns the number of runs written.
func (db *DB) WriteRunCSV(ctx context.Context, w io.Writer, f Filter) (int64, error) {
	cw := csv.NewWriter(w)
	if err := cw.Write(RunCSVHeader); err != nil {
		return 0, fmt.Errorf("write csv: %w", err)
	}
	var n int64
	rec := make([]string, len(RunCSVHeader))
	for e, err := range db.Runs(ctx, f) {
		if err != nil {
			return n, fmt.Errorf("write csv: %w", err)
		}
		rec[0] = strconv.FormatInt(e.ID, 10)
		rec[1], rec[2], rec[3], rec[4], rec[5] = e.Serial, e.Variant, e.ConfigHash, e.Station, e.Fixture
		rec[6], rec[7], rec[8] = e.Operator, e.Lot, e.Software
		rec[9], rec[10] = timeText(e.Started), timeText(e.Finished)
		rec[11], rec[12], rec[13] = string(e.Verdict), string(e.FailCode), numText(e.TripPF)
		rec[14], rec[15] = e.Panel, ""
		if e.Panel != "" {
			rec[15] = strconv.Itoa(e.Site)
		}
		if err := cw.Write(rec); err != nil {
			return n, fmt.Errorf("write csv: %w", err)
		}
		n++
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return n, fmt.Errorf("write csv: %w", err)
	}
	return n, nil
}
